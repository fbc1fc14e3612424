"""Forward-backward consistency of two vector fields: confidence and occlusion.

Vectors from image A to image B, ``w`` (at A's pixels), and from B back to A, ``ŵ`` (at B's
pixels), agree where the content of A is visible in B: following ``w`` from ``x`` and then ``ŵ``
from where it lands returns to ``x``, so ``w(x) + ŵ(x + w(x)) = 0``. Where the content of A is
hidden in B (occluded: covered by a nearer surface, or moved out of the frame) no vector can be
right and the round trip fails. Sundaram, Brox and Keutzer (2010) mark a pixel occluded when

    |w + ŵ|^2  >=  alpha1 (|w|^2 + |ŵ|^2) + alpha2,     alpha1 = 0.01, alpha2 = 0.5 px^2,

with ``ŵ`` sampled (bilinearly) at ``x + w(x)``. The relative term allows for the larger error of
large displacements; the constant term allows half a pixel-squared of estimation noise.

References
----------
.. [1] Sundaram, N., Brox, T. and Keutzer, K., "Dense point trajectories by GPU-accelerated large
   displacement optical flow", ECCV 2010 (occlusion criterion; constants 0.01 and 0.5 as
   recalled from the paper).
"""

from __future__ import annotations

import cv2
import numpy as np

__all__ = ["fb_consistency", "fb_check", "target_outside", "mapping_conflicts", "PAPER_RELATIVE",
           "PAPER_TOLERANCE"]

#: Sundaram et al. (2010): alpha1 (dimensionless) and alpha2 (px^2) of the occlusion criterion.
PAPER_RELATIVE = 0.01
PAPER_TOLERANCE = 0.5


def _targets(flow: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Absolute landing positions ``x + w(x)``, float32 (H, W) each."""
    h, w = flow.shape[:2]
    xs = np.arange(w, dtype=np.float32)[None, :] + flow[:, :, 0]
    ys = np.arange(h, dtype=np.float32)[:, None] + flow[:, :, 1]
    return xs, ys


def target_outside(flow: np.ndarray) -> np.ndarray:
    """Pixels whose vector lands outside the frame of the image it points to.

    Parameters
    ----------
    flow : ndarray, shape (H, W, 2), float
        Vectors ``(x, y)`` in pixels (x right, y down) at the pixels of an H x W image, pointing
        into another image of the same size.

    Returns
    -------
    ndarray, shape (H, W), bool
        True where ``x + w(x)`` lies outside ``[0, W - 1] x [0, H - 1]``, the span of pixel
        centres on which bilinear sampling has both neighbours. A pure translation by ``d`` > 0
        pixels in x thus flags the last ``ceil(d)`` columns.
    """
    h, w = flow.shape[:2]
    xs, ys = _targets(flow)
    return (xs < 0) | (xs > w - 1) | (ys < 0) | (ys > h - 1)


def fb_consistency(fwd: np.ndarray, bwd_at_target: np.ndarray, *,
                   tolerance: float = PAPER_TOLERANCE,
                   relative: float = PAPER_RELATIVE) -> tuple[np.ndarray, np.ndarray]:
    """Confidence and occlusion of ``fwd`` from the forward-backward check.

    Parameters
    ----------
    fwd : ndarray, shape (H, W, 2), float
        Vectors ``w`` at image A's pixels toward image B (pixels, x right, y down). Must be finite.
    bwd_at_target : ndarray, shape (H, W, 2), float
        Vectors ``ŵ`` at image B's pixels toward image A. Must be finite.
    tolerance : float, default 0.5
        ``alpha2`` of the criterion, in px^2: the squared round-trip residual allowed for a zero
        vector (Sundaram et al. 2010 use 0.5).
    relative : float, default 0.01
        ``alpha1`` of the criterion: the allowance proportional to ``|w|^2 + |ŵ|^2``
        (Sundaram et al. 2010 use 0.01).

    Returns
    -------
    conf : ndarray, shape (H, W), float32
        Confidence in 0..1. With the residual ``r^2 = |w + ŵ(x + w)|^2`` and the threshold
        ``T = relative (|w|^2 + |ŵ|^2) + tolerance``, ``conf = 2 ** (-r^2 / T)``: 1 for a perfect
        round trip, exactly 0.5 on the paper's occlusion threshold, below 0.5 beyond it, and 0
        where ``x + w`` leaves the frame.
    occ : ndarray, shape (H, W), float32
        1.0 where the pixel is occluded in B (the paper's criterion ``r^2 >= T`` holds, or its
        target is outside the frame, see `target_outside`), else 0.0. So ``occ == (conf < 0.5)``
        up to float rounding at the threshold.

    Notes
    -----
    ``ŵ`` is sampled at ``x + w(x)`` with OpenCV's bilinear ``remap`` (edge values repeated),
    whose sub-pixel weights are quantised to 1/32 px; on a smooth ``ŵ`` this changes the sampled
    vector by at most 1/64 of its change per pixel.

    References
    ----------
    .. [1] Sundaram, N., Brox, T., Keutzer, K., "Dense point trajectories by GPU-accelerated
       large displacement optical flow", ECCV 2010.

    Examples
    --------
    >>> import numpy as np
    >>> fwd = np.zeros((4, 6, 2), np.float32); fwd[..., 0] = 2.0
    >>> conf, occ = fb_consistency(fwd, -fwd)
    >>> occ[0].tolist()       # the last two columns land outside B
    [0.0, 0.0, 0.0, 0.0, 1.0, 1.0]
    """
    conf, occ, _ = fb_check(fwd, bwd_at_target, tolerance=tolerance, relative=relative)
    return conf, occ


def fb_check(fwd: np.ndarray, bwd_at_target: np.ndarray, *, tolerance: float = PAPER_TOLERANCE,
             relative: float = PAPER_RELATIVE) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """`fb_consistency` plus `target_outside`, sharing the work: ``(conf, occ, outside)``, the
    last a bool (H, W) array."""
    fwd = np.asarray(fwd, dtype=np.float32)
    bwd = np.asarray(bwd_at_target, dtype=np.float32)
    if fwd.shape != bwd.shape or fwd.ndim != 3 or fwd.shape[2] != 2:
        raise ValueError(f"fwd and bwd_at_target must both be (H, W, 2); got {fwd.shape} and {bwd.shape}")
    h, w = fwd.shape[:2]
    xs, ys = _targets(fwd)
    back = cv2.remap(np.ascontiguousarray(bwd), xs, ys, cv2.INTER_LINEAR, borderMode=cv2.BORDER_REPLICATE)
    outside = xs < 0
    outside |= xs > w - 1
    outside |= ys < 0
    outside |= ys > h - 1
    fu, fv, bu, bv = fwd[:, :, 0], fwd[:, :, 1], back[:, :, 0], back[:, :, 1]
    # r^2 = |w + w'|^2 and T = relative (|w|^2 + |w'|^2) + tolerance, in place (xs, ys reused)
    ru = np.add(fu, bu, out=xs)
    ru *= ru
    rv = np.add(fv, bv, out=ys)
    rv *= rv
    resid = np.add(ru, rv, out=ru)
    thresh = np.multiply(fu, fu)
    for a in (fv, bu, bv):
        thresh += a * a
    thresh *= np.float32(relative)
    thresh += np.float32(tolerance)
    np.maximum(thresh, np.float32(1e-12), out=thresh)   # tolerance 0 and a zero vector
    occ = resid >= thresh
    occ |= outside
    conf = np.divide(resid, thresh, out=rv)
    np.negative(conf, out=conf)
    np.exp2(conf, out=conf)
    conf[outside] = 0.0
    return conf, occ.astype(np.float32), outside


def mapping_conflicts(flow: np.ndarray, first: np.ndarray, second: np.ndarray, *, jump: float = 1.0,
                      radius: int = 1) -> np.ndarray:
    """Pixels that lose a many-to-one conflict of the vectors: the uniqueness constraint.

    Content visible in both images corresponds one to one, so two pixels of ``first`` whose
    vectors land on the same pixel of ``second`` cannot both be right unless their vectors agree
    (the uniqueness constraint of Marr & Poggio 1976; occlusion detection by the uniqueness of
    the mapping as in Xu, Jia & Matsushita 2012, both as recalled). Where pixels land on one
    pixel of ``second`` (targets rounded to the nearest pixel), the one whose patch matches
    ``second`` best wins; each other one whose vector differs from the winner's by more than
    ``jump`` pixels in x or y is marked.

    This catches what the forward-backward check misses beside an occluding edge: when both
    directions carry the occluder's vector into the background, an occluded background pixel
    with the occluder's vector and its reverse partner agree, but it lands on a background pixel
    of ``second`` that the truly corresponding (visible) pixel of ``first`` also lands on, and
    that one matches better.

    Parameters
    ----------
    flow : ndarray, shape (H, W, 2), float
        Vectors at ``first``'s pixels toward ``second``. Must be finite.
    first, second : ndarray, shape (H, W, C) or (H, W), float
        The two images (the same perceptual encoding).
    jump : float
        Vectors closer than this (px, in x and in y) to the winner's do not conflict with it.
    radius : int
        The match is the mean absolute difference over the (2r+1)^2 patch, summed over channels,
        of ``first`` against ``second`` sampled bilinearly at ``x + w(x)``.

    Returns
    -------
    ndarray, shape (H, W), bool
        True at the losing pixels. Vectors landing outside ``second`` never conflict.

    References
    ----------
    .. [1] Marr, D. and Poggio, T., "Cooperative computation of stereo disparity", Science
       194(4262), 1976 (the uniqueness constraint).
    .. [2] Xu, L., Jia, J. and Matsushita, Y., "Motion detail preserving optical flow
       estimation", IEEE PAMI 34(9), 2012 (occlusion from the uniqueness of the mapping).
    """
    f = np.asarray(flow, dtype=np.float32)
    h, w = f.shape[:2]
    a = np.asarray(first, dtype=np.float32)
    b = np.asarray(second, dtype=np.float32)
    a = a[:, :, None] if a.ndim == 2 else a
    b = b[:, :, None] if b.ndim == 2 else b
    if f.shape != (h, w, 2) or a.shape[:2] != (h, w) or b.shape != a.shape:
        raise ValueError(f"flow (H, W, 2) and two images (H, W[, C]) of one size expected; got "
                         f"{f.shape}, {a.shape}, {b.shape}")
    xs, ys = _targets(f)
    sampled = cv2.remap(np.ascontiguousarray(b), xs, ys, cv2.INTER_LINEAR, borderMode=cv2.BORDER_REPLICATE)
    sampled = sampled[:, :, None] if sampled.ndim == 2 else sampled
    cost = np.abs(sampled - a).sum(axis=2, dtype=np.float32)
    if radius > 0:
        cost = cv2.blur(cost, (2 * radius + 1, 2 * radius + 1), borderType=cv2.BORDER_REPLICATE)
    tx, ty = np.rint(xs).astype(np.intp), np.rint(ys).astype(np.intp)
    inside = ((tx >= 0) & (tx < w) & (ty >= 0) & (ty < h)).ravel()
    src = np.flatnonzero(inside)
    tgt = (ty * w + tx).ravel()[src]
    c = cost.ravel()[src]
    best = np.full(h * w, np.inf, np.float32)
    np.minimum.at(best, tgt, c)
    won = c <= best[tgt]
    u, v = np.ascontiguousarray(f[:, :, 0]).ravel(), np.ascontiguousarray(f[:, :, 1]).ravel()
    win_u, win_v = np.zeros(h * w, np.float32), np.zeros(h * w, np.float32)
    win_u[tgt[won]] = u[src[won]]
    win_v[tgt[won]] = v[src[won]]
    j = np.float32(jump)
    lose = ~won & ((np.abs(u[src] - win_u[tgt]) > j) | (np.abs(v[src] - win_v[tgt]) > j))
    out = np.zeros(h * w, bool)
    out[src[lose]] = True
    return out.reshape(h, w)
