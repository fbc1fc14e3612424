"""Discrete MAP search: brute force at the coarsest level, then ICM over candidate vectors.

At every pixel the posterior energy of a candidate vector ``c`` is

    E_p(c) = D_p(c) + lam * sum_{q ~ p} w_pq * rho(c - f_q)

with ``D`` the patch likelihood (``_likelihood.patch_cost``) and the prior of ``_prior``. Besag's
(1986) iterated conditional modes lowers the posterior energy pixel by pixel, each pixel taking
its best candidate given its neighbours; updating the two colours of a checkerboard in turn
keeps every update conditional on fixed neighbours, so whole half-images update at once.
"""

from __future__ import annotations

import numpy as np

from ._grid import shifted
from ._likelihood import patch_cost
from ._prior import local_cost


def checkerboard(h: int, w: int) -> tuple[np.ndarray, np.ndarray]:
    """Float32 masks (1 on the cell, 0 off) of the two checkerboard colours."""
    black = np.tile(np.array([[1, 0], [0, 1]], np.float32), ((h + 1) // 2, (w + 1) // 2))[:h, :w]
    black = np.ascontiguousarray(black)
    return black, 1.0 - black


def coarse_labels(f1, f2, xs, ys, wx, wy, *, reach: int, tau: float, tau_out: float, patch: int, lam: float,
                  eps: float, sweeps: int, support=None) -> tuple[np.ndarray, np.ndarray]:
    """Exhaustive MAP labelling over integer vectors within ``reach`` at the coarsest level.

    Every integer vector in the ``(2 reach + 1)**2`` square is scored by the patch likelihood
    (a cost volume); the winner-takes-all labels start ICM sweeps over the full label set.
    ``support`` (a ``_support.Support``) replaces the box patch by adaptive support weights.

    Returns
    -------
    u, v : ndarray, shape (H, W), float32
    """
    h, w = xs.shape
    offs = [(dx, dy) for dy in range(-reach, reach + 1) for dx in range(-reach, reach + 1)]
    zeros = np.zeros((h, w), np.float32)
    vol = np.stack([patch_cost(f1, f2, xs, ys, zeros + dx, zeros + dy, tau, tau_out, patch, support)
                    for dx, dy in offs])
    # Tiny preference for short vectors so flat regions resolve to zero, not to a tie.
    lens = np.array([np.hypot(dx, dy) for dx, dy in offs], np.float32) * np.float32(1e-4)
    vol += lens[:, None, None]
    lab_u = np.array([o[0] for o in offs], np.float32)
    lab_v = np.array([o[1] for o in offs], np.float32)
    best = np.argmin(vol, axis=0)
    u, v = lab_u[best], lab_v[best]
    masks = checkerboard(h, w)
    for _ in range(sweeps):
        for m in masks:
            energy = vol + np.float32(lam) * np.stack(
                [local_cost(zeros + a, zeros + b, u, v, wx, wy, eps) for a, b in zip(lab_u, lab_v)])
            best = np.argmin(energy, axis=0)
            u = u + m * (lab_u[best] - u)
            v = v + m * (lab_v[best] - v)
    return u.astype(np.float32), v.astype(np.float32)


def _block_noise(rng: np.random.Generator, h: int, w: int, radius: float, block: int):
    """Random offsets in ``[-radius, radius]``, constant over ``block`` x ``block`` tiles."""
    bh, bw = max(1, -(-h // block)), max(1, -(-w // block))
    n = rng.uniform(-radius, radius, (bh, bw, 2)).astype(np.float32)
    n = np.repeat(np.repeat(n, block, 0), block, 1)[:h, :w]
    return np.ascontiguousarray(n[..., 0]), np.ascontiguousarray(n[..., 1])


def icm(f1, f2, xs, ys, wx, wy, u, v, *, rng: np.random.Generator, sweeps: int, tau: float,
        tau_out: float, patch: int, lam: float, eps: float, jumps: tuple[int, ...], radius: float,
        block: int, extra: list[tuple[np.ndarray, np.ndarray]] = (), data_weight: np.ndarray | None = None,
        bias: tuple[np.ndarray, np.ndarray, np.ndarray] | None = None,
        support=None) -> tuple[np.ndarray, np.ndarray]:
    """Checkerboard ICM over candidate vectors at one level.

    Candidates at each sweep: the pixel's current vector; its neighbours' vectors at the
    distances in ``jumps`` in the four directions (propagation); the current vectors plus random
    offsets of radius ``radius``, ``radius / 2``, ``radius / 4`` (local search, constant over
    ``block``-pixel tiles so the patch likelihood stays meaningful); and the fields in ``extra``
    (e.g. the coarser level's vectors).

    ``data_weight`` (H, W), if given, multiplies the likelihood per pixel (0 at occluded pixels:
    the prior alone decides there); ``bias = (ref_u, ref_v, beta)`` adds
    ``beta * (|c_u - ref_u| + |c_v - ref_v|)`` to every candidate's energy (a preference for
    the reference motion where ``beta`` > 0). ``support`` (a ``_support.Support``), if given,
    replaces the box patch of the likelihood by adaptive support weights.

    Returns
    -------
    u, v : ndarray, shape (H, W), float32
        The updated field; the posterior energy of every pixel never rises.
    """
    h, w = u.shape
    masks = checkerboard(h, w)
    lam32 = np.float32(lam)
    for _ in range(sweeps):
        cands = [(u, v)]
        for j in jumps:
            for dy, dx in ((0, j), (0, -j), (j, 0), (-j, 0)):
                if (dx and j < w) or (dy and j < h):
                    cands.append((shifted(u, dy, dx), shifted(v, dy, dx)))
        r = radius
        for _k in range(3):
            nu, nv = _block_noise(rng, h, w, r, block)
            cands.append((u + nu, v + nv))
            r /= 2
        cands.extend(extra)
        datas = [patch_cost(f1, f2, xs, ys, cu, cv, tau, tau_out, patch, support)
                 for cu, cv in cands]
        if data_weight is not None:
            datas = [d * data_weight for d in datas]
        if bias is not None:
            ru, rv, beta = bias
            datas = [d + beta * (np.abs(cu - ru) + np.abs(cv - rv)) for d, (cu, cv) in zip(datas, cands)]
        for m in masks:
            best_e = None
            bu, bv = u, v
            for (cu, cv), d in zip(cands, datas):
                e = d + lam32 * local_cost(cu, cv, u, v, wx, wy, eps)
                if best_e is None:
                    best_e = e
                    continue
                better = (e < best_e).astype(np.float32) * m
                best_e = best_e + better * (e - best_e)
                bu = bu + better * (cu - bu)
                bv = bv + better * (cv - bv)
            u, v = bu, bv
    return u, v
