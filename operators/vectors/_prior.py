"""The Markov random field prior on vectors: a robust penalty on neighbour differences.

The prior energy of a field ``f`` is ``lam * sum_{p~q} w_pq * rho(|f_p - f_q|)`` over the
4-connected neighbour pairs, with edge-aware weights ``w_pq`` (``_pyramid.edge_weights``) and
the Charbonnier penalty ``rho(d) = sqrt(d**2 + eps**2)`` (a smooth, convex stand-in for the
absolute value, so smooth slopes cost in proportion to their gradient and object edges stay
sharp). This is the Gibbs prior of Geman & Geman (1984) in the form Konrad & Dubois (1992) use
for motion fields, with ``lam`` their prior weight.
"""

from __future__ import annotations

import cv2
import numpy as np


def charbonnier(du: np.ndarray, dv: np.ndarray, eps: float) -> np.ndarray:
    """``sqrt(du**2 + dv**2 + eps**2)``: the robust vector-difference penalty."""
    return np.sqrt(du * du + dv * dv + np.float32(eps * eps))


def local_cost(cu: np.ndarray, cv: np.ndarray, u: np.ndarray, v: np.ndarray, wx: np.ndarray,
               wy: np.ndarray, eps: float) -> np.ndarray:
    """Prior energy at each pixel if it took the candidate ``(cu, cv)`` and its 4 neighbours kept ``(u, v)``.

    Parameters
    ----------
    cu, cv : ndarray, shape (H, W), float32
        Candidate vector at each pixel.
    u, v : ndarray, shape (H, W), float32
        Current field (the neighbours' vectors).
    wx, wy : ndarray, shapes (H, W - 1) and (H - 1, W)
        Edge-aware pair weights.

    Returns
    -------
    ndarray, shape (H, W), float32
        ``sum_q w_pq * rho(c_p - f_q)`` (without the factor ``lam``).
    """
    out = np.zeros(cu.shape, np.float32)
    if cu.shape[1] > 1:
        out[:, :-1] += wx * charbonnier(cu[:, :-1] - u[:, 1:], cv[:, :-1] - v[:, 1:], eps)
        out[:, 1:] += wx * charbonnier(cu[:, 1:] - u[:, :-1], cv[:, 1:] - v[:, :-1], eps)
    if cu.shape[0] > 1:
        out[:-1] += wy * charbonnier(cu[:-1] - u[1:], cv[:-1] - v[1:], eps)
        out[1:] += wy * charbonnier(cu[1:] - u[:-1], cv[1:] - v[:-1], eps)
    return out


def irls_weights(u: np.ndarray, v: np.ndarray, wx: np.ndarray, wy: np.ndarray, lam: float,
                 eps: float) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Iteratively reweighted least-squares weights of the prior at the field ``(u, v)``.

    The Charbonnier pair penalty is replaced by the quadratic ``s_pq |f_p - f_q|**2 / 2`` with
    ``s_pq = lam * w_pq / rho(f_p - f_q)``, which has the same value and gradient at ``(u, v)``.

    Returns
    -------
    sx : ndarray, shape (H, W - 1)
    sy : ndarray, shape (H - 1, W)
    total : ndarray, shape (H, W)
        Sum of the weights of the pairs each pixel belongs to.
    """
    sx = np.float32(lam) * wx / charbonnier(u[:, 1:] - u[:, :-1], v[:, 1:] - v[:, :-1], eps)
    sy = np.float32(lam) * wy / charbonnier(u[1:] - u[:-1], v[1:] - v[:-1], eps)
    total = np.zeros(u.shape, np.float32)
    total[:, :-1] += sx
    total[:, 1:] += sx
    total[:-1] += sy
    total[1:] += sy
    return sx, sy, total


def neighbour_weights(sx: np.ndarray, sy: np.ndarray) -> tuple[np.ndarray, ...]:
    """The pair weights as four full (H, W) planes: toward the right, left, lower and upper
    neighbour, 0 where that neighbour does not exist (for ``neighbour_sum``)."""
    h, w = sx.shape[0], sy.shape[1]
    right, left, down, up = (np.zeros((h, w), np.float32) for _ in range(4))
    right[:, :-1] = sx
    left[:, 1:] = sx
    down[:-1] = sy
    up[1:] = sy
    return right, left, down, up


def neighbour_sum(a: np.ndarray, planes: tuple[np.ndarray, ...]) -> np.ndarray:
    """``sum_q s_pq * a_q`` over the 4 neighbours ``q`` of each pixel ``p`` of an (H, W) plane,
    ``planes`` from ``neighbour_weights`` (one padded copy of ``a``, four products)."""
    right, left, down, up = planes
    p = cv2.copyMakeBorder(a, 1, 1, 1, 1, cv2.BORDER_REPLICATE)
    return right * p[1:-1, 2:] + left * p[1:-1, :-2] + down * p[2:, 1:-1] + up * p[:-2, 1:-1]
