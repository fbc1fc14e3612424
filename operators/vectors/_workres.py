"""Reduced working resolution for vector work on large plates (private).

Vector fields are smooth almost everywhere; what needs the full pixel grid is where they change,
at object edges. On large plates (2K and up) ``vector-smooth`` and ``warp`` therefore do their
vector work (consistency, fill, smoothing; splatting) on a field reduced by 2 in each direction,
a quarter of the pixels, and bring the result back to the full size by means that put the edges
back on the full-size pixels: a joint bilateral enlargement guided by the full-size image
(``enlarge_joint``) for vectors that belong to an image, and a lookup of the full-size vectors
for the splatted in-between field (in ``warp``).

``work_step`` decides the factor: ``'full'`` is 1, ``'half'`` 2, ``'auto'`` 2 above
``AUTO_PIXELS`` (1.5 megapixels: HD and 2K plates and larger) and 1 below, so small plates and
the tests' known answers are untouched by it.

References
----------
.. [1] Kopf, J., Cohen, M.F., Lischinski, D. and Uyttendaele, M., "Joint bilateral upsampling",
   ACM Transactions on Graphics 26(3) (SIGGRAPH 2007).
"""

from __future__ import annotations

from typing import Literal

import cv2
import numpy as np

from graphcore.image import Image
from operators.vectors._grid import resize_field
from operators.vectors.channels import BWD, FWD

__all__ = ["AUTO_PIXELS", "Resolution", "work_step", "reduced_size", "shrink", "shrink_vectors", "shrink_image",
           "enlarge", "enlarge_vectors", "enlarge_joint"]

Resolution = Literal["auto", "full", "half"]

#: ``'auto'`` works at half resolution on plates with more pixels than this.
AUTO_PIXELS = 1_500_000
#: The reduced field keeps at least this many pixels on its shorter side.
_MIN_SIDE = 16
#: Colour scale of the joint enlargement's range weight, in perceptually encoded units (0..1).
JOINT_SIGMA = 0.05


def work_step(h: int, w: int, mode: Resolution) -> int:
    """The reduction factor (1 or 2) for an ``h`` x ``w`` field under ``mode``."""
    if mode not in ("auto", "full", "half"):
        raise ValueError(f"unknown working resolution {mode!r}; use 'auto', 'full' or 'half'")
    if mode == "full" or min(h, w) < 2 * _MIN_SIDE:
        return 1
    return 2 if mode == "half" or h * w > AUTO_PIXELS else 1


def reduced_size(h: int, w: int, step: int) -> tuple[int, int]:
    """``(rows, columns)`` of the reduced field (rounded up)."""
    return -(-h // step), -(-w // step)


def shrink(planes: np.ndarray, step: int) -> np.ndarray:
    """Area average of an (H, W) or (H, W, C) float array to the reduced size (float32)."""
    a = np.asarray(planes, np.float32)
    if step == 1:
        return a
    rh, rw = reduced_size(a.shape[0], a.shape[1], step)
    out = cv2.resize(a, (rw, rh), interpolation=cv2.INTER_AREA)
    return out.reshape((rh, rw) + a.shape[2:])


def shrink_vectors(vectors: np.ndarray, step: int) -> np.ndarray:
    """(H, W, 2) vectors in full-size pixels -> the reduced field, lengths in reduced pixels."""
    v = np.asarray(vectors, np.float32)
    return v if step == 1 else resize_field(v, *reduced_size(v.shape[0], v.shape[1], step), cv2.INTER_AREA)


def shrink_image(image: Image, step: int) -> Image:
    """An image of vectors (and anything else) at the reduced size, in one pass over its pixels:
    the x and y components of ``fwd`` and ``bwd`` rescaled to reduced pixels, other channels
    (confidence, occlusion as a fraction) averaged."""
    if step == 1:
        return image
    small = shrink(image.pixels, step)
    if small.ndim == 2:
        small = small[:, :, None]
    fx, fy = small.shape[1] / image.width, small.shape[0] / image.height
    for name in FWD + BWD:
        if name in image.channels:
            small[:, :, image.index(name)] *= np.float32(fx if name.endswith(".x") else fy)
    return Image(small, image.channels, dict(image.meta))


def enlarge(planes: np.ndarray, h: int, w: int, nearest: bool = False) -> np.ndarray:
    """Bilinear (or nearest) enlargement of an (h', w') or (h', w', C) array to ``h`` x ``w``."""
    a = np.asarray(planes)
    if a.shape[:2] == (h, w):
        return a
    out = cv2.resize(a, (w, h), interpolation=cv2.INTER_NEAREST if nearest else cv2.INTER_LINEAR)
    return out.reshape((h, w) + a.shape[2:])


def enlarge_vectors(vectors: np.ndarray, h: int, w: int) -> np.ndarray:
    """Bilinear enlargement of an (h', w', 2) field to ``h`` x ``w``, lengths rescaled."""
    return resize_field(vectors, h, w)


def _corners(n_full: int, n_small: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Per full-size coordinate: the two nearest reduced coordinates and the weight of the first
    (pixel centres aligned as ``cv2.resize`` aligns them)."""
    pos = (np.arange(n_full, dtype=np.float64) + 0.5) * (n_small / n_full) - 0.5
    lo = np.floor(pos)
    frac = pos - lo
    i0 = np.clip(lo, 0, n_small - 1).astype(np.intp)
    i1 = np.clip(lo + 1, 0, n_small - 1).astype(np.intp)
    return i0, i1, (1.0 - frac).astype(np.float32)


def enlarge_joint(planes: np.ndarray, guide_small: np.ndarray, guide: np.ndarray,
                  tolerance: tuple[float, ...], sigma: float = JOINT_SIGMA) -> np.ndarray:
    """Joint bilateral enlargement (Kopf et al. 2007) of reduced ``planes`` to the guide's size.

    Each full-size pixel takes the mean of the four nearest reduced samples, weighted by the
    bilinear weight times ``exp(-|g - g_k| / sigma)``, the likeness of the full-size guide ``g``
    at the pixel to the reduced guide ``g_k`` at the sample: across an image edge the samples of
    the other side drop out, so the enlarged field's edges sit on the full-size image's edges.
    Where the field is flat (every channel varies by less than its ``tolerance`` over the
    3 x 3 reduced samples around) the weights cannot matter and plain bilinear enlargement is
    used: the joint weights are computed only near the field's edges, a small part of a frame.

    Parameters
    ----------
    planes : ndarray, shape (h, w, C), float32
        The reduced field (vectors already in full-size pixel units where they are vectors).
    guide_small : ndarray, shape (h, w), float32
        The guide at the reduced size (area average of ``guide``).
    guide : ndarray, shape (H, W), float32
        The full-size guide (e.g. perceptually encoded luma).
    tolerance : tuple of float, one per channel
        Variation below which a channel counts as flat.
    sigma : float
        Range scale of the guide difference.

    Returns
    -------
    ndarray, shape (H, W, C), float32
    """
    p = np.ascontiguousarray(planes, np.float32)
    H, W = guide.shape
    sh, sw, c = p.shape
    out = cv2.resize(p, (W, H), interpolation=cv2.INTER_LINEAR).reshape(H, W, c)
    # where is the field not flat? (3 x 3 range per channel at the reduced size)
    kernel = np.ones((3, 3), np.uint8)
    busy = np.zeros((sh, sw), bool)
    for k in range(c):
        plane = np.ascontiguousarray(p[:, :, k])
        busy |= (cv2.dilate(plane, kernel) - cv2.erode(plane, kernel)) > tolerance[k]
    if not busy.any():
        return out
    mask = cv2.resize(busy.view(np.uint8), (W, H), interpolation=cv2.INTER_NEAREST)
    ys, xs = np.nonzero(mask)
    x0, x1, wx0 = _corners(W, sw)
    y0, y1, wy0 = _corners(H, sh)
    g = guide[ys, xs]
    inv = np.float32(-1.0 / sigma)
    num = np.zeros((ys.size, c), np.float32)
    den = np.zeros(ys.size, np.float32)
    for yy, wy in ((y0[ys], wy0[ys]), (y1[ys], 1.0 - wy0[ys])):
        for xx, wx in ((x0[xs], wx0[xs]), (x1[xs], 1.0 - wx0[xs])):
            bil = wy * wx
            wgt = np.exp(np.abs(g - guide_small[yy, xx]) * inv) * bil + np.float32(1e-6) * bil
            den += wgt
            num += p[yy, xx] * wgt[:, None]
    out[ys, xs] = num / den[:, None]
    return out
