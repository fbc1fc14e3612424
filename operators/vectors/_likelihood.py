"""The likelihood term: how well a candidate vector field matches ``second`` to ``first``.

The negative log-likelihood at a pixel is a truncated absolute difference of the matching
features (brightness, its gradients and a soft census signature, ``_pyramid.level``), averaged
over a small square patch around the pixel, a robust block-matching likelihood in the spirit of
Konrad & Dubois (1992). Vectors that point outside ``second`` get the fixed cost ``tau_out``:
no evidence either way, so the prior decides.
"""

from __future__ import annotations

import cv2
import numpy as np

from ._grid import outside, warp

_ONES4 = np.ones((1, 4), np.float32)


def pointwise_cost(f1: np.ndarray, f2: np.ndarray, xs: np.ndarray, ys: np.ndarray,
                   cu: np.ndarray, cv: np.ndarray, tau: float, tau_out: float) -> np.ndarray:
    """Truncated feature difference ``min(sum_c |F2_c(x + c) - F1_c(x)|, tau)`` per pixel.

    Parameters
    ----------
    f1, f2 : tuple of ndarray, shape (H, W, 4), float32
        Matching features of the two images at one level, in pieces of four channels
        (``_grid.chunks4``).
    xs, ys : ndarray, shape (H, W), float32
        Pixel grid of that level.
    cu, cv : ndarray, shape (H, W), float32
        Candidate vectors.
    tau : float
        Truncation: the largest cost of a mismatch.
    tau_out : float
        Cost of a vector that leaves the image (content not in view has no evidence).
    """
    h, w = cu.shape
    mx = xs + cu
    my = ys + cv
    acc = None
    for c1, c2 in zip(f1, f2):
        d = cv2.absdiff(warp(c2, mx, my), c1)
        acc = d if acc is None else cv2.add(acc, d, dst=acc)
    diff = cv2.transform(acc, _ONES4)
    c = np.minimum(diff, np.float32(tau))
    oob = outside(mx, my, h, w)
    c += oob * (np.float32(tau_out) - c)
    return c


def patch_cost(f1: np.ndarray, f2: np.ndarray, xs: np.ndarray, ys: np.ndarray,
               cu: np.ndarray, cv: np.ndarray, tau: float, tau_out: float,
               patch: int, support=None) -> np.ndarray:
    """``pointwise_cost`` averaged over a ``patch`` x ``patch`` box around each pixel.

    Exact for a candidate field that is constant over the patch; for a smoothly varying one
    (the propagation candidates) it is the patch cost of the local vectors. With ``support``
    (a ``_support.Support`` of the first image) the average is weighted by the adaptive
    support weights instead of the box, and ``patch`` is ignored.
    """
    c = pointwise_cost(f1, f2, xs, ys, cu, cv, tau, tau_out)
    if support is not None:
        return support.aggregate(c)
    if patch > 1:
        c = cv2.boxFilter(c, -1, (patch, patch), normalize=True, borderType=cv2.BORDER_REFLECT)
    return c
