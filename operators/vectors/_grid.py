"""Sampling helpers shared by the vector estimator: warping, neighbour shifts, flow resizing.

Vectors are kept as two planes ``u`` (x, right) and ``v`` (y, down), float32, shape (H, W), in
pixels of the level they belong to.
"""

from __future__ import annotations

import cv2
import numpy as np


def pixel_grid(h: int, w: int) -> tuple[np.ndarray, np.ndarray]:
    """Pixel-centre coordinates ``(xs, ys)``, float32, shape (H, W) each."""
    xs = np.broadcast_to(np.arange(w, dtype=np.float32)[None, :], (h, w))
    ys = np.broadcast_to(np.arange(h, dtype=np.float32)[:, None], (h, w))
    return np.ascontiguousarray(xs), np.ascontiguousarray(ys)


def warp(img: np.ndarray, mx: np.ndarray, my: np.ndarray) -> np.ndarray:
    """Bilinear samples of ``img`` at ``(mx, my)``; outside the image the edge value repeats.

    Parameters
    ----------
    img : ndarray, shape (H, W) or (H, W, C), float32
    mx, my : ndarray, shape (H', W'), float32
        Absolute sample positions in ``img``'s pixels.
    """
    return cv2.remap(img, mx, my, cv2.INTER_LINEAR, borderMode=cv2.BORDER_REPLICATE)


def chunks4(img: np.ndarray) -> tuple[np.ndarray, ...]:
    """An (H, W, C) float32 array as contiguous (H, W, 4) pieces, the last padded with zeros.

    OpenCV's ``remap`` samples 1-, 3- and 4-channel float images on a vectorised path with exact
    bilinear weights, but images of more channels on a generic path that is several times
    slower and quantises the weights to 1/32 px (measured with OpenCV 5.0: 7 channels took
    about 6 ms at 741 x 500, two 4-channel pieces about 2 ms). Features are therefore warped in
    pieces of four (``warp_chunks``); zero channels add nothing to a sum of differences.
    """
    h, w, c = img.shape
    out = []
    for i in range(0, c, 4):
        piece = np.zeros((h, w, 4), np.float32) if c - i < 4 else np.empty((h, w, 4), np.float32)
        piece[:, :, :min(4, c - i)] = img[:, :, i:i + 4]
        out.append(piece)
    return tuple(out)


def warp_chunks(chunks: tuple[np.ndarray, ...], mx: np.ndarray, my: np.ndarray) -> list[np.ndarray]:
    """``warp`` of each piece of ``chunks4``."""
    return [warp(c, mx, my) for c in chunks]


def resize_field(field: np.ndarray, h: int, w: int, interpolation: int = cv2.INTER_LINEAR) -> np.ndarray:
    """An (H, W, 2) vector field resampled to ``h`` x ``w`` in one OpenCV call, both components at
    once, lengths rescaled to the new pixel size (``resize_flow`` for a merged field). The input
    itself when the size already matches."""
    f = np.asarray(field, np.float32)
    sh, sw = f.shape[:2]
    if (sh, sw) == (h, w):
        return f
    out = cv2.resize(f, (w, h), interpolation=interpolation)
    out *= np.array([w / sw, h / sh], np.float32)
    return out


def outside(mx: np.ndarray, my: np.ndarray, h: int, w: int) -> np.ndarray:
    """1.0 where ``(mx, my)`` falls outside an ``h`` x ``w`` image, else 0.0 (float32)."""
    out = (mx < -0.5) | (mx > w - 0.5) | (my < -0.5) | (my > h - 0.5)
    return out.astype(np.float32)


def shifted(a: np.ndarray, dy: int, dx: int) -> np.ndarray:
    """``a`` sampled at ``(y + dy, x + dx)``, edge values repeated at the border."""
    h, w = a.shape[:2]
    if abs(dy) >= h or abs(dx) >= w:
        dy = int(np.clip(dy, -(h - 1), h - 1))
        dx = int(np.clip(dx, -(w - 1), w - 1))
    out = a
    if dy:
        out = np.concatenate([out[dy:], np.repeat(out[-1:], dy, 0)], 0) if dy > 0 else \
            np.concatenate([np.repeat(out[:1], -dy, 0), out[:dy]], 0)
    if dx:
        out = np.concatenate([out[:, dx:], np.repeat(out[:, -1:], dx, 1)], 1) if dx > 0 else \
            np.concatenate([np.repeat(out[:, :1], -dx, 1), out[:, :dx]], 1)
    return out if out is not a else a.copy()


def resize_flow(u: np.ndarray, v: np.ndarray, h: int, w: int) -> tuple[np.ndarray, np.ndarray]:
    """Bilinearly resample a vector field to ``h`` x ``w`` and rescale its lengths to match."""
    sh, sw = u.shape
    if (sh, sw) == (h, w):
        return u.copy(), v.copy()
    uu = cv2.resize(u, (w, h), interpolation=cv2.INTER_LINEAR) * np.float32(w / sw)
    vv = cv2.resize(v, (w, h), interpolation=cv2.INTER_LINEAR) * np.float32(h / sh)
    return uu.astype(np.float32), vv.astype(np.float32)
