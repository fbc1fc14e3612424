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
#: Source rows splatted per batch (bounds the temporaries; any value gives the same sums up to
#: float64 rounding).
_BAND = 64


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
    zz = np.maximum(np.asarray(z, np.float64), 0.0)
    top = zz.max() if zz.size else 0.0
    rel = np.asarray(reliability, np.float64)
    # Targets go to a grid padded by `pad` pixels: a corner outside the frame lands in the
    # padding (dropped at the end) instead of being masked out; positions further out are
    # clamped into the padding, where both of their corners stay outside. Source rows are
    # splatted in bands, each band's bincount spanning only the targets it reaches, so the
    # temporaries stay small (cache-sized) on typical fields.
    pad = 2
    gw, gh = w + 2 * pad, h + 2 * pad
    acc = np.zeros((5, gw * gh))
    cols = np.arange(w, dtype=np.float64)[None, :]
    for r0 in range(0, h, _BAND):
        r1 = min(h, r0 + _BAND)
        vb = v[r0:r1]
        xs = cols + tau * vb[:, :, 0]
        ys = np.arange(r0, r1, dtype=np.float64)[:, None] + tau * vb[:, :, 1]
        x0, y0 = np.floor(xs), np.floor(ys)
        fx, fy = (xs - x0).ravel(), (ys - y0).ravel()
        base = (np.clip(y0, -pad, h).astype(np.intp).ravel() + pad) * gw
        base += np.clip(x0, -pad, w).astype(np.intp).ravel() + pad
        # importance exp(sharpness z), shifted by the frame's largest z: same ratios, no overflow
        imp = np.exp(float(sharpness) * (zz[r0:r1] - top)).ravel()
        values = (imp, imp * vb[:, :, 0].ravel(), imp * vb[:, :, 1].ravel(), imp * rel[r0:r1].ravel())
        gx, gy = 1.0 - fx, 1.0 - fy
        lo = int(base.min())
        span = int(base.max()) - lo + gw + 2
        local = base - lo
        # Phase 1: bilinear weights to the four nearest pixel centres, accumulated per target:
        # the area (bilinear weights alone), the importance, and the importance-weighted vector
        # and reliability.
        for offset, (a, b) in ((0, (gx, gy)), (1, (fx, gy)), (gw, (gx, fy)), (gw + 1, (fx, fy))):
            bil = a * b
            idx = local + offset if offset else local
            acc[0, lo:lo + span] += np.bincount(idx, bil, minlength=span)
            for k, val in enumerate(values, start=1):
                acc[k, lo:lo + span] += np.bincount(idx, bil * val, minlength=span)
    area, wsum, sx, sy, sr = acc.reshape(5, gh, gw)[:, pad:pad + h, pad:pad + w]
    # Phase 2: normalise (the softmax); holes keep zeros. In place on the accumulators.
    holes = area < HOLE_COVERAGE
    wsum[holes | (wsum <= 0)] = 1.0
    out = np.empty((h, w, 2), np.float32)
    np.divide(sx, wsum, out=out[:, :, 0], casting="unsafe")
    np.divide(sy, wsum, out=out[:, :, 1], casting="unsafe")
    out[holes] = 0.0
    sr /= wsum
    sr[holes] = 0.0
    np.clip(sr, 0.0, 1.0, out=sr)
    return Splatted(out, area.astype(np.float32), sr.astype(np.float32), holes)
