"""Ordinary least squares for many channels at once (reference fit, first AR-IRLS step)."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

__all__ = ["OLSResult", "design_rank", "gram_rank", "ordinary_least_squares"]


@dataclass(frozen=True, eq=False)
class OLSResult:
    """Ordinary least squares of several response series on one design.

    Parameters
    ----------
    betas : ndarray, shape (n_regressors, n_series)
        Coefficients (response unit per regressor unit).
    xtx_inv : ndarray, shape (n_regressors, n_regressors)
        ``(X'X)^-1``.
    residual_var : ndarray, shape (n_series,)
        ``SSR / (n - k)``.
    dof : int
        Residual degrees of freedom ``n - k``.
    residuals : ndarray, shape (n, n_series)
        Residuals.
    """

    betas: np.ndarray
    xtx_inv: np.ndarray
    residual_var: np.ndarray
    dof: int
    residuals: np.ndarray

    @property
    def cov(self) -> np.ndarray:
        """Coefficient covariances, shape (n_series, n_regressors, n_regressors)."""
        return self.residual_var[:, None, None] * self.xtx_inv[None]


def design_rank(design: np.ndarray, *, max_condition: float = 1e7) -> int:
    """Numerical rank of a design matrix, with columns scaled to unit length.

    Parameters
    ----------
    design : ndarray, shape (n, k)
    max_condition : float, default=1e7
        Singular values below ``s_max / max_condition`` count as zero.

    Returns
    -------
    int

    Notes
    -----
    The singular values come from the eigenvalues of the k × k Gram matrix (cheap for
    long series); their precision, about ``sqrt(eps) s_max``, is well below the
    threshold.  An all-zero column counts as rank deficient.
    """
    if design.size == 0:
        return 0
    return gram_rank(design.T @ design, max_condition=max_condition)


def gram_rank(gram: np.ndarray, *, max_condition: float = 1e7) -> int:
    """Numerical rank of a design matrix from its Gram matrix ``X'X`` (see :func:`design_rank`).

    Parameters
    ----------
    gram : ndarray, shape (k, k)
        ``X'X`` of the design whose rank is wanted.
    max_condition : float, default=1e7
        Singular values of the column-scaled design below ``s_max / max_condition``
        count as zero.

    Returns
    -------
    int
    """
    if gram.size == 0:
        return 0
    norms = np.sqrt(np.clip(np.diag(gram), 0.0, None))
    norms[norms == 0] = 1.0
    eig = np.linalg.eigvalsh(gram / np.outer(norms, norms))
    s = np.sqrt(np.clip(eig, 0.0, None))
    return int((s > s.max() / max_condition).sum())


def ordinary_least_squares(response: np.ndarray, design: np.ndarray) -> OLSResult:
    """Least squares of each response column on the same design, via a QR decomposition.

    Parameters
    ----------
    response : ndarray, shape (n,) or (n, n_series)
        Response values without missing rows.
    design : ndarray, shape (n, k)
        Regressors, full column rank, ``n > k``.

    Returns
    -------
    OLSResult

    Notes
    -----
    ``β = R^-1 Q'y``, ``(X'X)^-1 = R^-1 R^-T``, ``σ² = ||y - Xβ||² / (n - k)``.
    """
    y = np.asarray(response, dtype=float)
    if y.ndim == 1:
        y = y[:, None]
    n, k = design.shape
    q, r = np.linalg.qr(design, mode="reduced")
    betas = np.linalg.solve(r, q.T @ y)
    r_inv = np.linalg.solve(r, np.eye(k))
    xtx_inv = r_inv @ r_inv.T
    residuals = y - design @ betas
    dof = n - k
    residual_var = np.einsum("ij,ij->j", residuals, residuals) / dof
    return OLSResult(
        betas=betas, xtx_inv=xtx_inv, residual_var=residual_var, dof=dof, residuals=residuals
    )
