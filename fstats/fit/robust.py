"""Robust regression: Tukey bisquare weights, MAD scale and iteratively reweighted least squares.

Pure numpy on arrays.  Used by the AR-IRLS fit on prewhitened data, where motion
spikes turn into isolated large whitened residuals that the bisquare weight sets to
zero.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import linalg

__all__ = [
    "TUKEY_C",
    "MAD_NORMAL",
    "tukey_bisquare_weights",
    "mad_scale",
    "weighted_least_squares",
    "IRLSResult",
    "irls",
]

#: Tukey bisquare tuning constant: 95 % asymptotic efficiency at the normal
#: distribution (Holland & Welsch 1977, recalled from memory; statsmodels'
#: ``TukeyBiweight`` default).
TUKEY_C: float = 4.685

#: Normal quantile Φ⁻¹(3/4): MAD / 0.6745 estimates σ for normal data.
MAD_NORMAL: float = 0.6744897501960817


def tukey_bisquare_weights(scaled_residuals: np.ndarray, c: float = TUKEY_C) -> np.ndarray:
    """Tukey bisquare weights ``(1 - (u/c)²)²`` for ``|u| <= c``, else 0.

    Parameters
    ----------
    scaled_residuals : ndarray
        Residuals divided by their scale (unitless).
    c : float, default=4.685
        Tuning constant.

    Returns
    -------
    ndarray
        Weights in [0, 1], same shape as the input.
    """
    u = np.asarray(scaled_residuals, dtype=float) / c
    return np.where(np.abs(u) <= 1.0, (1.0 - u * u) ** 2, 0.0)


def mad_scale(residuals: np.ndarray) -> float:
    """Robust residual scale: median absolute residual (about 0) divided by 0.6745.

    Parameters
    ----------
    residuals : ndarray, shape (n,)
        Residuals (flow unit).

    Returns
    -------
    float
        Scale in the residuals' unit; equals σ for normal residuals in large samples.
    """
    return float(np.median(np.abs(residuals)) / MAD_NORMAL)


def weighted_least_squares(
    response: np.ndarray,
    design: np.ndarray,
    weights: np.ndarray | None = None,
    *,
    unit_columns: bool = False,
) -> tuple[np.ndarray, np.ndarray]:
    """Weighted least squares by Cholesky on column-scaled normal equations.

    Parameters
    ----------
    response : ndarray, shape (n,)
        Response values.
    design : ndarray, shape (n, k)
        Regressors (full column rank; checked by the caller).
    weights : ndarray, shape (n,), optional
        Non-negative row weights (1 when omitted).
    unit_columns : bool, default=False
        The columns already have unit length (skip the scaling).

    Returns
    -------
    betas : ndarray, shape (k,)
        Coefficients.
    xtwx_inv : ndarray, shape (k, k)
        ``(X' W X)^-1``.
    """
    if unit_columns:
        norms = np.ones(design.shape[1])
        xs = design
    else:
        norms = np.sqrt(np.einsum("ij,ij->j", design, design))
        norms[norms == 0] = 1.0
        xs = design / norms
    if weights is None:
        gram = xs.T @ xs
        rhs = xs.T @ response
    else:
        root = np.sqrt(weights)
        xw = xs * root[:, None]
        gram = xw.T @ xw  # symmetric rank-k update
        rhs = xw.T @ (root * response)
    factor = linalg.cho_factor(gram, check_finite=False)
    betas = linalg.cho_solve(factor, rhs, check_finite=False) / norms
    inv = linalg.cho_solve(factor, np.eye(gram.shape[0]), check_finite=False)
    return betas, inv / np.outer(norms, norms)


@dataclass(frozen=True, eq=False)
class IRLSResult:
    """Outcome of :func:`irls`.

    Parameters
    ----------
    betas : ndarray, shape (k,)
        Robust coefficients.
    weights : ndarray, shape (n,)
        Final bisquare weights in [0, 1].
    scale : float
        Final MAD scale of the residuals.
    xtwx_inv : ndarray, shape (k, k)
        ``(X' W X)^-1`` at the final weights.
    n_iter : int
        Iterations used.
    converged : bool
        Whether the relative change of the coefficients fell below the tolerance.
    """

    betas: np.ndarray
    weights: np.ndarray
    scale: float
    xtwx_inv: np.ndarray
    n_iter: int
    converged: bool


def irls(
    response: np.ndarray,
    design: np.ndarray,
    *,
    c: float = TUKEY_C,
    betas: np.ndarray | None = None,
    max_iter: int = 50,
    tol: float = 1e-8,
) -> IRLSResult:
    """Tukey-bisquare M-estimate by iteratively reweighted least squares.

    Parameters
    ----------
    response : ndarray, shape (n,)
        Response values (e.g. prewhitened flow).
    design : ndarray, shape (n, k)
        Regressors (e.g. prewhitened design matrix), full column rank.
    c : float, default=4.685
        Bisquare tuning constant.
    betas : ndarray, shape (k,), optional
        Starting coefficients (ordinary least squares when omitted).
    max_iter : int, default=50
        Largest number of reweighting steps.
    tol : float, default=1e-8
        Stop when the change of the fitted values, ``||X Δβ||``, falls below ``tol``
        times the residual norm ``||e||``.

    Returns
    -------
    IRLSResult

    Notes
    -----
    Each step: residuals ``e = y - Xβ``, scale ``s = median|e| / 0.6745``, weights
    ``w = bisquare(e / s)``, then ``β = (X'WX)^-1 X'Wy`` (Holland & Welsch 1977,
    recalled from memory; the order of operations of statsmodels ``RLM``).
    """
    norms = np.sqrt(np.einsum("ij,ij->j", design, design))
    norms[norms == 0] = 1.0
    scaled = design / norms  # unit-length columns: the WLS steps skip their own scaling
    if betas is None:
        betas, _ = weighted_least_squares(response, design)
    betas = np.asarray(betas, dtype=float) * norms
    design = scaled
    converged = False
    weights = np.ones(response.shape[0])
    inv = None
    scale = np.nan
    n_iter = 0
    for step in range(1, max_iter + 1):
        n_iter = step
        resid = response - design @ betas
        scale = mad_scale(resid)
        if not scale > 0:
            weights = np.ones(response.shape[0])
            betas, inv = weighted_least_squares(response, design, None, unit_columns=True)
            converged = True
            break
        weights = tukey_bisquare_weights(resid / scale, c)
        new, inv = weighted_least_squares(response, design, weights, unit_columns=True)
        step = np.linalg.norm(design @ (new - betas)) / max(np.linalg.norm(resid), 1e-300)
        betas = new
        if step < tol:
            converged = True
            break
    resid = response - design @ betas
    scale = mad_scale(resid)
    return IRLSResult(
        betas=betas / norms,
        weights=weights,
        scale=scale,
        xtwx_inv=inv / np.outer(norms, norms),
        n_iter=n_iter,
        converged=converged,
    )
