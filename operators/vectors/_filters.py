"""Private building blocks of ``vector-smooth``: box sums, window gathers, scanline searches.

Every function here is vectorised over the whole frame (OpenCV box filters and morphology, numpy
accumulations); none loops over pixels. Planes are float32 (H, W) unless stated.
"""

from __future__ import annotations

from collections.abc import Sequence

import cv2
import numpy as np

__all__ = ["box_mean", "window_range", "window_offsets", "sortable_keys", "weighted_median_rows",
           "nearest_valid", "nearest_valid_at", "robust_affine", "guide_planes", "weighted_guided_filter"]


# -- box filters ---------------------------------------------------------------------------------
def box_mean(a: np.ndarray, radius: int, out: np.ndarray | None = None) -> np.ndarray:
    """Mean over the (2r+1)^2 window, counting pixels outside the frame as 0.

    Ratios of two such means (a weighted sum over a weight sum) are exact window statistics at
    the border too, which is how every caller uses them. ``out`` (same shape and dtype, may be
    ``a`` itself): where to write the result.
    """
    k = 2 * radius + 1
    if out is None:
        return cv2.boxFilter(a, -1, (k, k), normalize=True, borderType=cv2.BORDER_CONSTANT)
    return cv2.boxFilter(a, -1, (k, k), dst=out, normalize=True, borderType=cv2.BORDER_CONSTANT)


def window_range(a: np.ndarray, radius: int) -> np.ndarray:
    """max - min of ``a`` over the (2r+1)^2 window (pixels outside the frame ignored)."""
    kernel = np.ones((2 * radius + 1, 2 * radius + 1), np.uint8)
    return cv2.dilate(a, kernel) - cv2.erode(a, kernel)


# -- weighted median over windows ----------------------------------------------------------------
def window_offsets(radius: int, padded_width: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Flat-index offsets of the (2r+1)^2 window in a padded image, and their (dy, dx)."""
    dy, dx = np.mgrid[-radius:radius + 1, -radius:radius + 1]
    dy, dx = dy.ravel(), dx.ravel()
    return (dy * padded_width + dx).astype(np.intp), dy, dx


def sortable_keys(values: np.ndarray) -> tuple[np.ndarray, int]:
    """int32 keys ordering like ``values`` (float32, shape (N, K)), column index in the low bits.

    The IEEE-754 bit pattern is made monotonic (negative values get their magnitude bits
    flipped); the lowest ``ceil(log2 K)`` bits are replaced by the column index, so sorting the
    keys sorts the values (up to ties between values agreeing to ~2^-(23 - bits) relative) and
    carries each value's column along. Returns the keys and the index mask.
    """
    k = values.shape[1]
    bits = max(1, int(np.ceil(np.log2(k))))
    mask = (1 << bits) - 1
    raw = np.ascontiguousarray(values, dtype=np.float32).view(np.int32)
    keys = raw ^ ((raw >> 31) & np.int32(0x7FFFFFFF))
    keys &= np.int32(~mask)
    keys |= np.arange(k, dtype=np.int32)[None, :]
    return keys, mask


def weighted_median_rows(values: np.ndarray, weights: np.ndarray) -> np.ndarray:
    """Weighted median of each row: the smallest value whose cumulative weight reaches half.

    Parameters
    ----------
    values : ndarray, shape (N, K), float32
    weights : ndarray, shape (N, K), float32, >= 0, every row with a positive sum

    Returns
    -------
    ndarray, shape (N,), float32
        The minimiser of ``sum_k weights[n, k] * |u - values[n, k]|`` over the row's values.
    """
    keys, mask = sortable_keys(values)
    keys.sort(axis=1)
    n, k = values.shape
    flat = (keys & np.int32(mask)) + (np.arange(n, dtype=np.intp) * k)[:, None]
    cum = np.cumsum(np.take(weights, flat), axis=1)
    pos = np.count_nonzero(cum < 0.5 * cum[:, -1:], axis=1)
    return np.take(values, flat[np.arange(n), pos])


# -- scanline searches -----------------------------------------------------------------------------
def nearest_valid(valid: np.ndarray, side: np.ndarray | None) -> tuple[np.ndarray, np.ndarray]:
    """Column of the nearest valid pixel to the left and to the right along each row.

    Parameters
    ----------
    valid : ndarray, shape (H, W), bool
    side : ndarray, shape (H, W), bool, or None
        Matte side of each pixel; a search stops where the side changes, so a candidate always
        lies on the same side as the pixel, with no other-side pixel in between.

    Returns
    -------
    left, right : ndarray, shape (H, W), int32
        Column of the nearest valid pixel at or left of (right of) each pixel, -1 where none.
    """
    h, w = valid.shape
    cols = np.broadcast_to(np.arange(w, dtype=np.int32)[None, :], (h, w))
    left = np.maximum.accumulate(np.where(valid, cols, -1), axis=1)
    right = np.minimum.accumulate(np.where(valid, cols, w)[:, ::-1], axis=1)[:, ::-1].copy()
    right[right == w] = -1
    if side is not None:
        change = np.zeros((h, w), bool)
        change[:, 1:] = side[:, 1:] != side[:, :-1]
        start = np.maximum.accumulate(np.where(change, cols, 0), axis=1)
        change_r = np.zeros((h, w), bool)
        change_r[:, :-1] = change[:, 1:]
        end = np.minimum.accumulate(np.where(change_r, cols, w - 1)[:, ::-1], axis=1)[:, ::-1]
        left[left < start] = -1
        right[right > end] = -1
    return left, right


def nearest_valid_at(invalid: np.ndarray, ys: np.ndarray, xs: np.ndarray
                     ) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Nearest valid pixel left, right, above and below invalid pixels (no matte sides).

    The same answer as `nearest_valid` along rows and columns, found from the runs of invalid
    pixels alone (work proportional to their number, not to the frame): the nearest valid
    pixel to the left of an invalid one is the pixel just before its run.

    Parameters
    ----------
    invalid : ndarray, shape (H, W), bool
    ys, xs : ndarray, shape (N,), int
        Pixels to answer for; each must be invalid.

    Returns
    -------
    left, right : ndarray, shape (N,), intp
        Column of the nearest valid pixel left (right) of each pixel on its row, -1 where none.
    up, down : ndarray, shape (N,), intp
        Row of the nearest valid pixel above (below) each pixel on its column, -1 where none.
    """
    h, w = invalid.shape
    rows_major = np.flatnonzero(invalid)                      # sorted: runs along rows
    qy, qx = np.divmod(rows_major, w)
    cols_major = np.sort(qx * h + qy)                          # sorted: runs along columns
    ys, xs = np.asarray(ys, np.intp), np.asarray(xs, np.intp)
    left, right = _run_ends(rows_major, w, np.searchsorted(rows_major, ys * w + xs))
    up, down = _run_ends(cols_major, h, np.searchsorted(cols_major, xs * h + ys))
    return left, right, up, down


def _run_ends(q: np.ndarray, length: int, at: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """For sorted flat indices ``q`` of lines of ``length``: the position on its line just before
    and just after the run of consecutive entries holding ``q[at]`` (-1 past the line's ends)."""
    n = len(q)
    idx = np.arange(n)
    starts = np.ones(n, bool)
    starts[1:] = (q[1:] != q[:-1] + 1) | (q[1:] % length == 0)
    ends = np.ones(n, bool)
    ends[:-1] = starts[1:]
    first = q[np.maximum.accumulate(np.where(starts, idx, 0))[at]] % length
    last = q[np.minimum.accumulate(np.where(ends, idx, n - 1)[::-1])[::-1][at]] % length
    return np.where(first > 0, first - 1, -1), np.where(last < length - 1, last + 1, -1)


# -- dominant motion -----------------------------------------------------------------------------
def robust_affine(xs: np.ndarray, ys: np.ndarray, vectors: np.ndarray, *,
                  iterations: int = 10) -> np.ndarray:
    """Robust affine fit ``v = M [x, y, 1]`` to sampled vectors (Cauchy-weighted least squares).

    Parameters
    ----------
    xs, ys : ndarray, shape (N,)
        Pixel positions.
    vectors : ndarray, shape (N, 2)
        Vectors at those positions.

    Returns
    -------
    ndarray, shape (2, 3), float64
        ``M``. Started from the per-component median (a translation), then iteratively
        reweighted with Cauchy weights ``1 / (1 + (r / s)^2)``, ``s = 1.4826 * median(r) + 0.1 px``
        (robust statistics, common practice), so the motion of the largest coherent region wins.
        Fewer than 3 samples give the median translation (zero with none).
    """
    n = len(xs)
    model = np.zeros((2, 3))
    if n == 0:
        return model
    model[:, 2] = np.median(vectors, axis=0)
    if n < 3:
        return model
    cx, cy = float(np.mean(xs)), float(np.mean(ys))
    scale = max(float(np.ptp(xs)), float(np.ptp(ys)), 1.0)
    design = np.stack([(xs - cx) / scale, (ys - cy) / scale, np.ones(n)], axis=1)
    local = np.zeros((2, 3))
    local[:, 2] = model[:, 2]
    for _ in range(iterations):
        resid = np.linalg.norm(vectors - design @ local.T, axis=1)
        s = 1.4826 * float(np.median(resid)) + 0.1
        wts = 1.0 / (1.0 + (resid / s) ** 2)
        dw = design * wts[:, None]
        try:
            local = np.linalg.solve(dw.T @ design + 1e-9 * np.eye(3), dw.T @ vectors).T
        except np.linalg.LinAlgError:
            break
    # back to absolute pixel coordinates
    model[:, 0] = local[:, 0] / scale
    model[:, 1] = local[:, 1] / scale
    model[:, 2] = local[:, 2] - model[:, 0] * cx - model[:, 1] * cy
    return model


# -- guided filter ---------------------------------------------------------------------------------
def guide_planes(guide: np.ndarray | Sequence[np.ndarray] | None,
                 shape: tuple[int, int]) -> list[np.ndarray]:
    """The guide as a list of contiguous float32 (H, W) planes (1 or 3 of them).

    ``guide`` is an array (H, W), (H, W, 1) or (H, W, 3), or already a list/tuple of (H, W)
    planes (passed through when contiguous float32, so callers can split a guide once).
    """
    if guide is None:
        return []
    if isinstance(guide, (list, tuple)):
        planes = [np.ascontiguousarray(p, dtype=np.float32) for p in guide]
        if len(planes) not in (1, 3) or any(p.shape != shape for p in planes):
            raise ValueError(f"guide planes must be 1 or 3 arrays of shape {shape}")
        return planes
    g = np.asarray(guide, dtype=np.float32)
    if g.ndim == 2:
        g = g[:, :, None]
    if g.shape[:2] != shape or g.shape[2] not in (1, 3):
        raise ValueError(f"guide must be (H, W), (H, W, 1) or (H, W, 3) with (H, W) = {shape}; "
                         f"got {g.shape}")
    return [np.ascontiguousarray(g[:, :, c]) for c in range(g.shape[2])]


def _sum(terms: list[np.ndarray]) -> np.ndarray | int:
    """``sum(terms)`` (from 0, so -0.0 becomes 0.0 as there), accumulated in one new array."""
    if not terms:
        return 0
    acc = np.add(terms[0], 0)
    for t in terms[1:]:
        acc += t
    return acc


def _weighted_box(weight: np.ndarray, inv_norm: np.ndarray, a: np.ndarray, radius: int) -> np.ndarray:
    """box_mean(weight * a) * inv_norm, in one fresh array: a weighted window mean."""
    t = np.multiply(weight, a)
    box_mean(t, radius, out=t)
    t *= inv_norm
    return t


def _coefficients(planes: list[np.ndarray], targets: list[np.ndarray], weight: np.ndarray, radius: int,
                  eps: float) -> tuple[list[tuple[list[np.ndarray], np.ndarray]], np.ndarray]:
    """Window-averaged guided-filter coefficients ``(A_i, B)`` per target, and the support.
    (Worked in place where it can: fewer fresh temporaries.)"""
    tiny = np.float32(1e-12)
    w_mean = box_mean(weight, radius)
    inv_w = np.maximum(w_mean, tiny)
    np.divide(1.0, inv_w, out=inv_w)

    def wmean(a: np.ndarray) -> np.ndarray:
        return _weighted_box(weight, inv_w, a, radius)

    def centred(a: np.ndarray, m1: np.ndarray, m2: np.ndarray) -> np.ndarray:
        t = wmean(a)
        t -= m1 * m2
        return t

    means = [wmean(p) for p in planes]
    n = len(planes)
    e = np.float32(eps)
    inv: list[list[np.ndarray]] = []
    if n == 1:
        var = centred(planes[0] * planes[0], means[0], means[0])
        var += e
        inv = [[np.divide(1.0, var, out=var)]]
    elif n == 3:
        cov = {}
        for i in range(3):
            for j in range(i, 3):
                cov[i, j] = centred(planes[i] * planes[j], means[i], means[j])
        a, b, c = cov[0, 0], cov[0, 1], cov[0, 2]
        d, f, g = cov[1, 1], cov[1, 2], cov[2, 2]
        a += e
        d += e
        g += e

        def minor(p: np.ndarray, q: np.ndarray, r: np.ndarray, s: np.ndarray) -> np.ndarray:
            t = p * q
            t -= r * s
            return t

        # inverse of the symmetric 3x3 [[a b c] [b d f] [c f g]] by cofactors
        i00, i01, i02 = minor(d, g, f, f), minor(c, f, b, g), minor(b, f, c, d)
        i11, i12, i22 = minor(a, g, c, c), minor(b, c, a, f), minor(a, d, b, b)
        det = a * i00
        det += b * i01
        det += c * i02
        det[~(np.abs(det) > tiny)] = tiny
        inv_det = np.divide(1.0, det, out=det)
        for m in (i00, i01, i02, i11, i12, i22):
            m *= inv_det
        inv = [[i00, i01, i02], [i01, i11, i12], [i02, i12, i22]]

    support = box_mean(w_mean, radius)
    inv_s = np.maximum(support, tiny)
    np.divide(1.0, inv_s, out=inv_s)

    def spread(a: np.ndarray) -> np.ndarray:
        return _weighted_box(w_mean, inv_s, a, radius)

    result = []
    for p in targets:
        mp = wmean(p)
        cov_ip = [centred(planes[i] * p, means[i], mp) for i in range(n)]
        coef = [_sum([inv[i][j] * cov_ip[j] for j in range(n)]) for i in range(n)]
        offset = mp - _sum([coef[i] * means[i] for i in range(n)])
        big_a = [spread(coef[i]) for i in range(n)]
        big_b = spread(offset)
        result.append((big_a, big_b))
    return result, support


def weighted_guided_filter(planes: list[np.ndarray], targets: list[np.ndarray], weight: np.ndarray,
                           radius: int, eps: float, step: int = 1) -> tuple[list[np.ndarray], np.ndarray]:
    """Guided filter with per-pixel weights (He, Sun & Tang's filter, weighted least squares).

    In every (2r+1)^2 window ``k`` the target ``p`` is fitted by ``a_k . I + b_k`` minimising
    ``sum_i c_i (a_k . I_i + b_k - p_i)^2 / sum_i c_i + eps |a_k|^2``; each pixel then averages
    the fits of the windows covering it, window ``k`` weighted by its ``sum_i c_i``:
    ``q = A . I + B``. With all weights equal this is the colour guided filter of He et al.
    (2013), grey and colour-guide forms.

    With ``step`` > 1 the coefficients ``A, B`` are computed on a grid ``step`` times coarser
    (guide, weights and weighted targets area-averaged, radius ``round(r / step)``) and brought
    back with bilinear interpolation weighted by their support, before ``q = A . I + B`` is
    formed with the full-resolution guide: the fast guided filter of He & Sun (2015), which
    keeps the guide's edges because only the smooth coefficient fields are subsampled.

    Parameters
    ----------
    planes : list of ndarray (H, W), float32
        Guide planes ``I`` (0, 1 or 3; none gives a weighted box filter).
    targets : list of ndarray (H, W), float32
        Planes to filter (vector components), all with the same guide and weights.
    weight : ndarray (H, W), float32, >= 0
    radius : int
    eps : float
        Regularisation, in squared guide units.
    step : int, default 1
        Subsampling of the coefficient grid.

    Returns
    -------
    filtered : list of ndarray (H, W), float32
    support : ndarray (H, W), float32
        Weight that reached each pixel (0 where no weighted pixel lies within about 2r).
    """
    h, w = weight.shape
    step = max(1, int(step))
    if step > 1 and min(h, w) >= 4 * step:
        hs, ws = -(-h // step), -(-w // step)

        def small(a: np.ndarray) -> np.ndarray:
            return cv2.resize(a, (ws, hs), interpolation=cv2.INTER_AREA)

        w_s = small(weight)
        inv = 1.0 / np.maximum(w_s, np.float32(1e-12))
        p_s = [small(weight * p) * inv for p in targets]
        coeffs, support_s = _coefficients([small(p) for p in planes], p_s, w_s,
                                          max(1, int(round(radius / step))), eps)

        def big(a: np.ndarray) -> np.ndarray:
            return cv2.resize(a, (w, h), interpolation=cv2.INTER_LINEAR)

        support = big(support_s)
        inv_sup = np.maximum(support, np.float32(1e-12))
        np.divide(1.0, inv_sup, out=inv_sup)
        scratch = np.empty((h, w), np.float32)
        out = []
        for big_a, big_b in coeffs:
            q = big(support_s * big_b)
            q *= inv_sup
            for i, plane in enumerate(planes):
                t = cv2.resize(support_s * big_a[i], (w, h), dst=scratch, interpolation=cv2.INTER_LINEAR)
                t *= inv_sup
                t *= plane
                q += t
            out.append(q.astype(np.float32, copy=False))
        return out, support
    coeffs, support = _coefficients(planes, targets, weight, radius, eps)
    out = []
    for big_a, big_b in coeffs:
        q = big_b.copy()
        for i, plane in enumerate(planes):
            q += big_a[i] * plane
        out.append(q.astype(np.float32, copy=False))
    return out, support
