"""Adaptive support weights: patch likelihoods that do not straddle object edges.

A plain box patch averages the matching cost over pixels of both surfaces where it overlaps an
object edge, so the foreground's vector wins beside the edge on the background side too (edge
fattening). Yoon & Kweon (2006) instead weigh each pixel ``q`` of the window around ``p`` by how
likely it is to lie on the same surface, judged from the image: close in colour and close in
space,

    w(p, q) = exp(-|I(p) - I(q)| / sigma_c - |p - q| / sigma_s)

and average the cost with these weights. Here the weights come from the first image alone (the
image the vectors belong to), so they are computed once per pyramid level and window offset and
reused for every candidate vector.
"""

from __future__ import annotations

import cv2
import numpy as np


class Support:
    """Normalised adaptive support weights of one image at one pyramid level.

    Parameters
    ----------
    guide : ndarray, shape (H, W, C), float32
        The image the weights are judged on (perceptual encoding, roughly 0..1).
    radius : int
        The window is ``(2 radius + 1)`` pixels square.
    sigma_c : float
        Colour scale: the L1 colour difference (summed over channels) at which a window pixel's
        weight falls by ``1/e``.
    sigma_s : float
        Spatial scale, in pixels of the level.

    Notes
    -----
    Window pixels outside the image get weight 0; the weights of each pixel sum to 1. The
    weights are stored flat on a zero-padded grid so ``aggregate`` is a sum of contiguous 1-D
    products, one per window offset.

    References
    ----------
    .. [1] K.-J. Yoon and I. S. Kweon, "Adaptive support-weight approach for correspondence
       search", IEEE PAMI 28(4), 2006. doi:10.1109/TPAMI.2006.70
    """

    def __init__(self, guide: np.ndarray, radius: int, sigma_c: float, sigma_s: float):
        g = guide if guide.ndim == 3 else guide[:, :, None]
        h, w = g.shape[:2]
        r = int(radius)
        self.shape = (h, w)
        self.radius = r
        self.wp = w + 2 * r
        pad = r + 1             # spare rows keep every flat shift below inside the array
        planes = [cv2.copyMakeBorder(np.ascontiguousarray(g[:, :, c]), pad, pad + r + 1, r, r,
                                     cv2.BORDER_CONSTANT, value=np.nan) for c in range(g.shape[2])]
        n = h * self.wp
        start = pad * self.wp
        flat = [p.ravel() for p in planes]
        weights = {}
        # w(p, p + o) = w(p + o, p): each colour difference serves the offsets o and -o.
        for dy in range(0, r + 1):
            for dx in range(-r if dy else 0, r + 1):
                off = dy * self.wp + dx
                lo, hi = start - off, start + n + off
                diff = np.zeros(hi - lo, np.float32)
                for f in flat:
                    diff += np.abs(f[lo + off:hi + off] - f[lo:hi])
                e = np.nan_to_num(np.exp(diff * np.float32(-1.0 / sigma_c)), nan=0.0)   # outside: 0
                sp = np.float32(np.exp(-np.hypot(dx, dy) / sigma_s))
                weights[off] = e[off:off + n] * sp
                if off:
                    weights[-off] = e[:n] * sp
        self.offsets: list[int] = list(weights)
        weights = list(weights.values())
        total = np.zeros(n, np.float32)
        for wt in weights:
            total += wt
        inv = 1.0 / np.maximum(total, np.float32(1e-30))         # 0 only in the padding columns
        self.weights = [wt * inv for wt in weights]
        self._start = start
        self._pad = pad

    def aggregate(self, cost: np.ndarray) -> np.ndarray:
        """Weighted mean of ``cost`` (H, W) over each pixel's window: (H, W) float32."""
        h, w = self.shape
        r = self.radius
        flat = cv2.copyMakeBorder(np.ascontiguousarray(cost, dtype=np.float32), self._pad,
                                  self._pad, r, r, cv2.BORDER_CONSTANT, value=0).ravel()
        n = h * self.wp
        s = self._start
        acc = np.zeros(n, np.float32)
        for off, wt in zip(self.offsets, self.weights):
            cv2.accumulateProduct(wt, flat[s + off:s + off + n], acc)     # acc += wt * shifted cost
        return acc.reshape(h, self.wp)[:, r:r + w]

