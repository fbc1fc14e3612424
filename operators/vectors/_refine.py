"""Continuous subpixel refinement: the same posterior energy, linearised and solved by IRLS.

At each warp the matching features of ``second`` are sampled at ``x + f`` and linearised in the
increment ``df`` (Horn & Schunck 1981; warping as in Brox, Bruhn, Papenberg & Weickert, ECCV
2004). The robust data penalty ``sum_c sqrt(r_c**2 + eps_d**2)`` and the Charbonnier prior are
replaced by iteratively reweighted quadratics, and the resulting sparse linear system is swept
with red-black successive over-relaxation (SOR), every pixel solving its 2 x 2 block exactly.
"""

from __future__ import annotations

import cv2
import numpy as np

from ._grid import outside, warp_chunks
from ._icm import checkerboard
from ._prior import irls_weights, neighbour_sum, neighbour_weights


def refine(f1, f1x, f1y, f2, f2x, f2y, xs, ys, wx, wy, u, v, *, lam: float, eps_d: float,
           eps_s: float, warps: int, iters: int, reweight: int, omega: float,
           median: int, data_weight: np.ndarray | None = None,
           channels: int | None = None) -> tuple[np.ndarray, np.ndarray]:
    """Refine the field ``(u, v)`` at one level.

    Parameters
    ----------
    f1, f2 : tuple of ndarray, shape (H, W, 4), float32
        Matching features of ``first`` and ``second`` in pieces of four channels
        (``_grid.chunks4``; padding channels are zero).
    f1x, f1y, f2x, f2y : tuple of ndarray, shape (H, W, 4), float32
        Their x and y derivatives, in the same pieces.
    xs, ys : ndarray, shape (H, W)
        Pixel grid.
    wx, wy : ndarray
        Edge-aware prior weights (``_pyramid.Level``).
    u, v : ndarray, shape (H, W), float32
        Starting field.
    lam : float
        Prior weight (lambda).
    eps_d, eps_s : float
        Charbonnier constants of the data and prior penalties.
    warps, iters, reweight : int
        Outer warps; SOR sweeps per warp; sweeps between IRLS re-weightings.
    omega : float
        Over-relaxation factor (1 = Gauss-Seidel).
    median : int
        Side (3 or 5) of a median filter applied to the field after each warp (0 or 1 for
        none; Sun, Roth & Black 2010 find it removes outliers of the linearisation).
    data_weight : ndarray, shape (H, W), optional
        Per-pixel weight of the data term (0 at occluded pixels: the prior fills them).
    channels : int, optional
        How many feature channels are real (the rest of the last piece is padding); all when
        omitted.

    Returns
    -------
    u, v : ndarray, shape (H, W), float32
    """
    h, w = u.shape
    masks = checkerboard(h, w)
    eps2 = np.float32(eps_d * eps_d)
    om = np.float32(omega)
    for _ in range(warps):
        mx = xs + u
        my = ys + v
        valid = 1.0 - outside(mx, my, h, w)
        if data_weight is not None:
            valid = valid * data_weight
        iz = _planes([a - b for a, b in zip(warp_chunks(f2, mx, my), f1)], channels)
        ix = _planes([0.5 * (a + b) for a, b in zip(warp_chunks(f2x, mx, my), f1x)], channels)
        iy = _planes([0.5 * (a + b) for a, b in zip(warp_chunks(f2y, mx, my), f1y)], channels)
        du = np.zeros((h, w), np.float32)
        dv = np.zeros((h, w), np.float32)
        for it in range(iters):
            if it % reweight == 0:
                a11 = np.zeros((h, w), np.float32)
                a12 = np.zeros((h, w), np.float32)
                a22 = np.zeros((h, w), np.float32)
                b1 = np.zeros((h, w), np.float32)
                b2 = np.zeros((h, w), np.float32)
                for cz, cx, cy in zip(iz, ix, iy):
                    r = cz + cx * du + cy * dv
                    wd = valid / np.sqrt(r * r + eps2)
                    wx_ = wd * cx
                    wy_ = wd * cy
                    a11 += wx_ * cx
                    a12 += wx_ * cy
                    a22 += wy_ * cy
                    b1 += wx_ * cz
                    b2 += wy_ * cz
                sx, sy, stot = irls_weights(u + du, v + dv, wx, wy, lam, eps_s)
                planes = neighbour_weights(sx, sy)
                m11 = a11 + stot + np.float32(1e-9)
                m22 = a22 + stot + np.float32(1e-9)
                inv_det = 1.0 / (m11 * m22 - a12 * a12)
                # Right-hand side parts that do not change within the sweeps.
                c1 = -b1 - stot * u
                c2 = -b2 - stot * v
            for m in masks:
                r1 = c1 + neighbour_sum(u + du, planes)
                r2 = c2 + neighbour_sum(v + dv, planes)
                nu = (m22 * r1 - a12 * r2) * inv_det
                nv = (m11 * r2 - a12 * r1) * inv_det
                mo = m * om
                du += mo * (nu - du)
                dv += mo * (nv - dv)
        u = u + du
        v = v + dv
        if median > 1 and min(h, w) >= median:
            u = cv2.medianBlur(u, median)
            v = cv2.medianBlur(v, median)
    return u, v


def _planes(chunks: list[np.ndarray], channels: int | None) -> list[np.ndarray]:
    """The (H, W) planes of four-channel pieces, without the padding beyond ``channels``."""
    planes = [p for c in chunks for p in cv2.split(c)]
    return planes if channels is None else planes[:channels]
