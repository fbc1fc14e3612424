"""A depth-order proxy for splat conflicts (private): how likely a pixel is to lie in front.

Two surfaces that both land on one output pixel at the in-between time and are both visible at
the two samples (a surface passing over another only for a moment) cannot be ordered by the
vectors' consistency. The same motion rules as ``vector-smooth``'s occlusion fill order them:

- ``"dominant"``: the background moves with the frame's dominant motion (a robust affine fit,
  `operators.vectors._filters.robust_affine`, to the visible vectors); the farther a vector lies
  from that motion, the more likely its surface is in front;
- ``"slower"``: the larger the vector, the nearer the surface (exact for a rectified, parallel
  stereo pair; a locked-off camera for time).

Both are returned as ``front`` in 0..1: the distance (or length) divided by its 99th percentile
over the frame (at least ``MIN_SCALE`` = 1 px, so estimation noise of a still frame does not
count as depth), clipped at 1.
"""

from __future__ import annotations

from typing import Literal

import numpy as np

__all__ = ["front_ness", "MIN_SCALE"]

#: Smallest distance scale (px) of the front-ness measure.
MIN_SCALE = 1.0


def front_ness(vectors: np.ndarray, visible: np.ndarray, rule: Literal["dominant", "slower"],
               samples: int = 20000) -> np.ndarray:
    """Per-pixel likelihood (0..1) of lying in front, from the motion alone.

    Parameters
    ----------
    vectors : ndarray, shape (H, W, 2), float
        Vectors at an image's pixels (pixels, x right, y down). Must be finite.
    visible : ndarray, shape (H, W), bool
        Pixels whose vectors are trusted for the dominant-motion fit (not occluded).
    rule : {"dominant", "slower"}
    samples : int
        At most about this many pixels (a regular grid) enter the fit.

    Returns
    -------
    ndarray, shape (H, W), float32
    """
    v = np.asarray(vectors)
    if v.dtype != np.float32:
        v = v.astype(np.float64)
    h, w = v.shape[:2]
    # float32 vectors meet float64 positions below: numpy promotes them exactly.
    if rule == "slower":
        dist = np.hypot(v[:, :, 0].astype(np.float64), v[:, :, 1].astype(np.float64))
    elif rule == "dominant":
        from operators.vectors._filters import robust_affine

        region = np.asarray(visible, bool)
        if not region.any():
            region = np.ones((h, w), bool)
        step = max(1, int(np.ceil(np.sqrt(region.size / samples))))
        ys, xs = np.nonzero(region[::step, ::step])
        ys, xs = ys * step, xs * step
        model = robust_affine(xs.astype(np.float64), ys.astype(np.float64), v[ys, xs].astype(np.float64))
        gx = np.arange(w, dtype=np.float64)[None, :]
        gy = np.arange(h, dtype=np.float64)[:, None]
        dx = v[:, :, 0] - (model[0, 0] * gx + model[0, 1] * gy + model[0, 2])
        dy = v[:, :, 1] - (model[1, 0] * gx + model[1, 1] * gy + model[1, 2])
        dist = np.hypot(dx, dy, out=dx)
    else:
        raise ValueError(f"unknown rule {rule!r}; use 'dominant' or 'slower'")
    scale = max(float(np.percentile(dist, 99)), MIN_SCALE)
    return np.clip(dist / scale, 0.0, 1.0).astype(np.float32)
