"""Forward splatting of a vector field to an in-between time, with an importance weight (private).

A pixel ``x`` of the neighbour image moves along its vector ``v(x)`` and sits at ``x + tau v(x)``
at the in-between time (``tau`` in 0..1 is the fraction of the way travelled). Its vector is
splatted there bilinearly (weights to the four nearest pixel centres) and multiplied by an
importance weight ``exp(sharpness * z(x))``; every output pixel takes the weighted mean of what
landed on it (softmax splatting, Niklaus & Liu, CVPR 2020). Where several surfaces land on one
pixel, the one with the larger ``z`` wins smoothly; where one surface lands alone its weight
cancels in the normalisation, so ``z`` only ever decides conflicts.

Pixels on which (almost) nothing lands are holes: content the neighbour does not show at all
(it was hidden behind something that has since moved). They get a vector by the hole filling of
Baker et al. (IJCV 2011): here the background side's vector along the hole's row and column
(`operators.vectors.smooth.fill_occluded`), and a visibility of 0.

References
----------
.. [1] Niklaus, S. and Liu, F., "Softmax splatting for video frame interpolation", CVPR 2020.
.. [2] Baker, S. et al., "A database and evaluation methodology for optical flow", IJCV 92(1),
   2011 (the frame-interpolation algorithm: splat the vectors to time t, fill holes, then warp).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

__all__ = ["Splatted", "splat_vectors", "HOLE_COVERAGE", "FULL_COVERAGE"]

#: Below this much splatted area (in source pixels) an output pixel is a hole.
HOLE_COVERAGE = 0.02
#: At or above this much splatted area an output pixel counts as fully covered (visibility 1). A
#: plain translation lands exactly 1 on every pixel; 0.5 tolerates a 2x local stretch (zoom-in,
#: surfaces turning toward the camera) without calling the stretched area partly hidden.
FULL_COVERAGE = 0.5


@dataclass(frozen=True)
class Splatted:
    """Result of `splat_vectors`.

    Attributes
    ----------
    vectors : ndarray, shape (H, W, 2), float32
        The splatted vector field at the in-between time (holes still 0: fill them afterwards).
    coverage : ndarray, shape (H, W), float32
        Splatted area per output pixel (sum of bilinear weights, importance not included).
    reliability : ndarray, shape (H, W), float32
        Importance-weighted mean of the source pixels' reliability (0 in holes).
    holes : ndarray, shape (H, W), bool
        ``coverage < HOLE_COVERAGE``.
    """

    vectors: np.ndarray
    coverage: np.ndarray
    reliability: np.ndarray
    holes: np.ndarray


def splat_vectors(vectors: np.ndarray, tau: float, z: np.ndarray, reliability: np.ndarray, *,
                  sharpness: float) -> Splatted:
    """Splat ``vectors`` forward by ``tau`` of their length, softmax-weighted by ``z``.

    Parameters
    ----------
    vectors : ndarray, shape (H, W, 2), float
        ``v(x)`` at the neighbour's pixels, (x, y) in pixels, x right, y down. Must be finite.
    tau : float
        Fraction of the way travelled, 0 < tau < 1 (``t`` from the previous sample, ``1 - t``
        from the next one).
    z : ndarray, shape (H, W), float
        Importance, >= 0 (larger wins conflicts).
    reliability : ndarray, shape (H, W), float
        Per source pixel, 0..1; averaged onto the output with the same weights as the vectors.
    sharpness : float
        ``alpha`` of the importance ``exp(alpha z)``; 0 averages conflicts plainly.

    Returns
    -------
    Splatted
    """
    v = np.asarray(vectors, dtype=np.float32)
    h, w = v.shape[:2]
    n = h * w
    cols = np.arange(w, dtype=np.float64)[None, :]
    rows = np.arange(h, dtype=np.float64)[:, None]
    xs = (cols + tau * v[:, :, 0]).ravel()
    ys = (rows + tau * v[:, :, 1]).ravel()
    x0, y0 = np.floor(xs), np.floor(ys)
    fx, fy = xs - x0, ys - y0
    x0, y0 = x0.astype(np.int64), y0.astype(np.int64)
    zz = np.maximum(np.asarray(z, np.float64), 0.0)
    imp = np.exp(float(sharpness) * (zz - zz.max())).ravel()   # shifted: same ratios, no overflow
    vx, vy = v[:, :, 0].ravel().astype(np.float64), v[:, :, 1].ravel().astype(np.float64)
    rel = np.asarray(reliability, np.float64).ravel()

    area = np.zeros(n)
    wsum = np.zeros(n)
    sx = np.zeros(n)
    sy = np.zeros(n)
    sr = np.zeros(n)
    # Phase 1: bilinear weights to the four nearest pixel centres, accumulated per target pixel.
    for dx, dy in ((0, 0), (1, 0), (0, 1), (1, 1)):
        bil = (fx if dx else 1.0 - fx) * (fy if dy else 1.0 - fy)
        tx, ty = x0 + dx, y0 + dy
        inside = (tx >= 0) & (tx < w) & (ty >= 0) & (ty < h) & (bil > 0)
        idx = (ty * w + tx)[inside]
        b = bil[inside]
        wt = b * imp[inside]
        area += np.bincount(idx, b, minlength=n)
        wsum += np.bincount(idx, wt, minlength=n)
        sx += np.bincount(idx, wt * vx[inside], minlength=n)
        sy += np.bincount(idx, wt * vy[inside], minlength=n)
        sr += np.bincount(idx, wt * rel[inside], minlength=n)
    # Phase 2: normalise (the softmax); holes keep zeros.
    holes = area < HOLE_COVERAGE
    safe = np.where(holes | (wsum <= 0), 1.0, wsum)
    out = np.stack([sx / safe, sy / safe], axis=1)
    out[holes] = 0.0
    r = np.where(holes, 0.0, sr / safe)
    return Splatted(out.reshape(h, w, 2).astype(np.float32), area.reshape(h, w).astype(np.float32),
                    np.clip(r, 0.0, 1.0).reshape(h, w).astype(np.float32), holes.reshape(h, w))
