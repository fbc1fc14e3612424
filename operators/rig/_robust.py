"""Robust linear regression by iteratively reweighted least squares (private).

Each output channel ``c`` is modelled as ``Y[:, c] ~ X_c @ beta_c`` (every channel may have its
own design). The rows share one robust weight, from the length of the row's residual vector over
all channels, so a pixel that disagrees in any channel (other content: parallax, a moving
subject, a highlight one camera sees) is down-weighted as a whole.

Method: a least-squares start, then M-estimation by IRLS (Holland, P.W. and Welsch, R.E.,
"Robust regression using iteratively reweighted least-squares", Communications in Statistics -
Theory and Methods 6(9), 1977): first Huber's weights (convex, so the result does not depend on
the start; Huber, P.J., "Robust estimation of a location parameter", Ann. Math. Statist. 35(1),
1964), then Tukey's biweight (Beaton, A.E. and Tukey, J.W., Technometrics 16(2), 1974), which
gives rows beyond ``4.685`` robust standard deviations weight zero: they are rejected outright
instead of merely down-weighted. The scale is the normalised median absolute residual
(``1.4826 * median``, consistent for Gaussian noise). The tuning constants 1.345 and 4.685 give
95 % efficiency on Gaussian noise (the textbook values of both estimators).
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

__all__ = ["RobustFit", "DegenerateFit", "robust_fit"]

_HUBER, _TUKEY, _MAD = 1.345, 4.685, 1.4826


class DegenerateFit(ValueError):
    """The weighted design does not determine the parameters (e.g. a constant image)."""


@dataclass(frozen=True)
class RobustFit:
    """Result of :func:`robust_fit`.

    Attributes
    ----------
    betas : list of ndarray
        One coefficient vector per output channel (the columns of that channel's design).
    weights : ndarray, shape (N,)
        Final weight of each row (prior weight times the robust weight); 0 for rejected rows.
    inliers : ndarray of bool, shape (N,)
        Rows that kept a positive robust weight among the rows with a positive prior weight.
    residual : ndarray, shape (N,)
        Length of each row's residual vector over all channels.
    scale : float
        Robust standard deviation of the residual length at the end.
    """

    betas: list[np.ndarray]
    weights: np.ndarray
    inliers: np.ndarray
    residual: np.ndarray
    scale: float


def _solve(designs: Sequence[np.ndarray], Y: np.ndarray, w: np.ndarray) -> list[np.ndarray]:
    sw = np.sqrt(w)[:, None]
    betas = []
    for c, X in enumerate(designs):
        A = X * sw
        s = np.linalg.svd(A, compute_uv=False)
        if s.size == 0 or s[-1] <= 1e-7 * max(s[0], 1e-30):
            raise DegenerateFit(f"channel {c}: the compared pixels do not determine the fit "
                                f"(singular values {s[0]:.3g} .. {s[-1]:.3g})" if s.size else "no rows")
        beta, *_ = np.linalg.lstsq(A, Y[:, c] * sw[:, 0], rcond=None)
        betas.append(beta)
    return betas


def _residual(designs: Sequence[np.ndarray], Y: np.ndarray, betas: Sequence[np.ndarray]) -> np.ndarray:
    pred = np.stack([X @ b for X, b in zip(designs, betas)], axis=1)
    return np.sqrt(np.sum((Y - pred) ** 2, axis=1))


def robust_fit(designs: Sequence[np.ndarray], Y: np.ndarray, prior: np.ndarray, *,
               huber_iterations: int = 6, tukey_iterations: int = 10) -> RobustFit:
    """Fit ``Y[:, c] ~ designs[c] @ beta_c`` robustly (see the module docstring).

    Parameters
    ----------
    designs : sequence of ndarray, each shape (N, P_c), float64
    Y : ndarray, shape (N, C), float64, C = len(designs)
    prior : ndarray, shape (N,), float64
        Prior weight of each row (0 excludes a row: outside a matte, not finite).

    Raises
    ------
    DegenerateFit
        When the rows with weight do not determine the coefficients.
    """
    prior = np.asarray(prior, np.float64)
    used = prior > 0
    if int(used.sum()) < max(X.shape[1] for X in designs) + 1:
        raise DegenerateFit(f"only {int(used.sum())} usable pixels to fit on")
    w = prior.copy()
    betas = _solve(designs, Y, w)
    r = _residual(designs, Y, betas)
    floor = 1e-9 * (1.0 + float(np.median(np.abs(Y[used]))))
    scale = floor
    robust = np.ones_like(w)
    for it in range(huber_iterations + tukey_iterations):
        scale = max(_MAD * float(np.median(r[used])), floor)
        u = r / scale
        if it < huber_iterations:
            robust = np.where(u <= _HUBER, 1.0, _HUBER / np.maximum(u, 1e-300))
        else:
            robust = np.where(u < _TUKEY, (1.0 - (u / _TUKEY) ** 2) ** 2, 0.0)
        w = prior * robust
        new = _solve(designs, Y, w)
        change = max(float(np.max(np.abs(a - b))) for a, b in zip(new, betas))
        betas = new
        r = _residual(designs, Y, betas)
        if it >= huber_iterations and change < 1e-10:
            break
    inliers = used & (robust > 0)
    return RobustFit(betas, w, inliers, r, scale)
