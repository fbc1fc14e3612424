"""Enlarging vectors from one pyramid level to the next by the likelihood, not by blending.

Bilinear enlargement averages the vectors of two surfaces across their edge, so the pixels of
the band around every object edge start from a vector that belongs to neither. Here every fine
pixel instead chooses, among the vectors of the coarse pixels around it (and the bilinear blend),
the one its own likelihood prefers: a MAP choice over a small candidate set that keeps edges
where the images put them.
"""

from __future__ import annotations

import cv2
import numpy as np

from ._grid import resize_flow, shifted


def _nearest(a: np.ndarray, h: int, w: int, dy: int, dx: int, scale: float) -> np.ndarray:
    """Coarse plane ``a`` shifted by (dy, dx) coarse pixels, enlarged by pixel replication."""
    return cv2.resize(shifted(a, dy, dx), (w, h), interpolation=cv2.INTER_NEAREST) * np.float32(scale)


def select_upsample(u: np.ndarray, v: np.ndarray, h: int, w: int, cost) -> tuple[np.ndarray, np.ndarray]:
    """Enlarge ``(u, v)`` to ``h`` x ``w``, each pixel taking the cheapest nearby coarse vector.

    The candidates are the bilinear enlargement and the vectors of the 3 x 3 coarse pixels
    around the fine pixel's own; ties keep the bilinear one. The refinement that follows
    restores subpixel smoothness where a piecewise-constant choice was taken.

    Parameters
    ----------
    u, v : ndarray, shape (h', w'), float32
        Coarse vectors, in coarse pixels.
    h, w : int
        Fine size.
    cost : callable
        ``cost(cu, cv) -> (h, w)`` likelihood cost of candidate fields at the fine level.

    Returns
    -------
    u, v : ndarray, shape (h, w), float32
    """
    bu, bv = resize_flow(u, v, h, w)
    if min(u.shape) < 2:
        return bu, bv
    sx = w / u.shape[1]
    sy = h / u.shape[0]
    best_u, best_v = bu, bv
    best = cost(bu, bv)
    for dy in (-1, 0, 1):
        for dx in (-1, 0, 1):
            cu = _nearest(u, h, w, dy, dx, sx)
            cv_ = _nearest(v, h, w, dy, dx, sy)
            c = cost(cu, cv_)
            better = c < best
            best = np.where(better, c, best)
            best_u = np.where(better, cu, best_u)
            best_v = np.where(better, cv_, best_v)
    return best_u.astype(np.float32), best_v.astype(np.float32)
