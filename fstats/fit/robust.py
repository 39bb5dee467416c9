"""Robust regression: Tukey bisquare weights, MAD scale and iteratively reweighted least squares.

Pure numpy on arrays.  Used by the AR-IRLS fit on prewhitened data, where motion
spikes turn into isolated large whitened residuals that the bisquare weight sets to
zero.  The IRLS the fit runs, on regressors held as rows or behind an operator, is in
:mod:`fstats.fit.rows_irls`; :func:`irls` here is its plain reference.
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
    "MAX_GRAM_CONDITION",
    "NormalEquations",
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
    w = 1.0 - u * u
    w = np.where(w > 0.0, w, 0.0)  # |u| >= 1 (1 - u² <= 0) and NaN get weight 0
    return w * w


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
    a = np.abs(np.ravel(residuals))
    n = a.size
    if n == 0 or not np.isfinite(a.sum()):
        return float(np.median(a) / MAD_NORMAL)
    half = n // 2
    if n % 2:
        median = np.partition(a, half)[half]
    else:  # the mean of the two middle values, as numpy.median
        part = np.partition(a, (half - 1, half))
        median = 0.5 * (part[half - 1] + part[half])
    return float(median / MAD_NORMAL)


#: Largest 1-norm condition number of the column-scaled Gram matrix ``X'WX`` solved by
#: Cholesky (``cond(X)`` up to about 1e4); above it, or when Cholesky fails, the
#: least-squares problem is solved from the rows instead (SVD), which keeps full accuracy.
MAX_GRAM_CONDITION: float = 1e8


class NormalEquations:
    """``X'WX`` for repeated solves: Cholesky of the column-scaled Gram, else rows by SVD.

    Parameters
    ----------
    gram : ndarray, shape (k, k)
        ``X'WX``.
    rows : ndarray, shape (k, n), optional
        ``(√W X)'``, the weighted regressors as rows; needed for the fallback when the
        Gram matrix is not positive definite or too ill-conditioned for Cholesky
        (condition above :data:`MAX_GRAM_CONDITION`).  Without it such a Gram raises
        :class:`numpy.linalg.LinAlgError`.

    Notes
    -----
    Scaling the columns to unit length first (``D^-1 X'WX D^-1``) makes the condition
    number that of the correlation structure, not of the regressors' units.
    """

    def __init__(self, gram: np.ndarray, rows: np.ndarray | None = None) -> None:
        gram = np.asarray(gram, dtype=float)
        k = gram.shape[0]
        norms = np.sqrt(np.clip(np.diag(gram), 0.0, None))
        norms[~(norms > 0)] = 1.0
        self.norms = norms
        self.factor = None
        self.condition = np.inf  # 1-norm condition of the column-scaled Gram (Cholesky only)
        self._inv = None
        self._svd = None
        scaled = gram / np.outer(norms, norms)
        try:
            factor = linalg.cho_factor(scaled, check_finite=False)
            inv = linalg.cho_solve(factor, np.eye(k), check_finite=False)
            cond = np.abs(scaled).sum(axis=0).max() * np.abs(inv).sum(axis=0).max()
            if np.isfinite(cond) and cond <= MAX_GRAM_CONDITION:
                self.condition = float(cond)
                self.factor = factor
                self._inv = inv / np.outer(norms, norms)
        except (np.linalg.LinAlgError, ValueError):
            pass
        if self.factor is None:
            if rows is None:
                raise np.linalg.LinAlgError("Gram matrix is singular or too ill-conditioned")
            u, sv, vt = np.linalg.svd(np.asarray(rows, dtype=float).T / norms, full_matrices=False)
            keep = sv > sv[0] * k * np.finfo(float).eps
            self._svd = (u[:, keep], sv[keep], vt[keep])

    @property
    def cholesky(self) -> bool:
        """Whether the solves use the Cholesky factor (False: the SVD fallback)."""
        return self.factor is not None

    def solve(self, rhs: np.ndarray) -> np.ndarray:
        """``(X'WX)^-1 rhs`` for ``rhs`` of shape (k,) or (k, m)."""
        norms = self.norms.reshape((-1,) + (1,) * (np.ndim(rhs) - 1))
        scaled = rhs / norms
        if self.factor is not None:
            out = linalg.cho_solve(self.factor, scaled, check_finite=False)
        else:
            _, sv, vt = self._svd
            power = (sv * sv).reshape((-1,) + (1,) * (np.ndim(rhs) - 1))
            out = vt.T @ ((vt @ scaled) / power)
        return out / norms

    def inverse(self) -> np.ndarray:
        """``(X'WX)^-1`` (pseudo-inverse on the fallback), shape (k, k)."""
        if self._inv is None:
            _, sv, vt = self._svd
            self._inv = (vt.T / (sv * sv)) @ vt / np.outer(self.norms, self.norms)
        return self._inv

    def lstsq(self, response: np.ndarray) -> np.ndarray:
        """Least-squares coefficients of ``√W y`` on the rows (fallback only), shape (k,)."""
        u, sv, vt = self._svd
        return vt.T @ ((u.T @ response) / sv) / self.norms


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
        Kept for compatibility; the columns are always scaled to unit length internally.

    Returns
    -------
    betas : ndarray, shape (k,)
        Coefficients.
    xtwx_inv : ndarray, shape (k, k)
        ``(X' W X)^-1``.

    Notes
    -----
    When Cholesky fails or the scaled Gram matrix is ill-conditioned (see
    :class:`NormalEquations`), the coefficients come from an SVD of ``√W X`` instead.
    """
    rows = np.asarray(design, dtype=float).T
    y = np.asarray(response, dtype=float)
    if weights is not None:
        root = np.sqrt(weights)
        rows = rows * root
        y = root * y
    normal = NormalEquations(rows @ rows.T, rows)
    if normal.cholesky:
        betas = normal.solve(rows @ y)
    else:
        betas = normal.lstsq(y)
    return betas, normal.inverse()


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
    xtwx_inv : ndarray, shape (k, k) or None
        ``(X' W X)^-1`` at the final weights (None from
        :func:`fstats.fit.rows_irls.irls_rows`, whose caller forms it with the final
        weights).
    n_iter : int
        Iterations used.
    converged : bool
        Whether the relative change of the coefficients fell below the tolerance.
    normal : NormalEquations or None
        The factored ``X'WX`` the last steps used (only from
        :func:`fstats.fit.rows_irls.irls_rows`), to start a related fit from.
    """

    betas: np.ndarray
    weights: np.ndarray
    scale: float
    xtwx_inv: np.ndarray | None
    n_iter: int
    converged: bool
    normal: NormalEquations | None = None


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
