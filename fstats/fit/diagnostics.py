"""Residual diagnostics: autocorrelation, Durbin-Watson, Ljung-Box, R², short-channel share."""

from __future__ import annotations

import numpy as np
from scipy import stats

from fstats.fit.autoregressive import autocovariance

__all__ = ["acf", "durbin_watson", "ljung_box", "r_squared", "variance_share"]


def acf(series: np.ndarray, max_lag: int) -> np.ndarray:
    """Sample autocorrelation at lags 0..max_lag (NaN samples ignored).

    Parameters
    ----------
    series : ndarray, shape (n,)
    max_lag : int
        Largest lag in samples.

    Returns
    -------
    ndarray, shape (max_lag + 1,)
        ``γ_k / γ_0`` with the biased (divide by n) autocovariance, as
        ``statsmodels.tsa.stattools.acf`` computes it.
    """
    gamma = autocovariance(series, max_lag, method="mle", demean=True)
    return gamma / gamma[0]


def durbin_watson(residuals: np.ndarray) -> float:
    """Durbin-Watson statistic ``Σ (e_t - e_{t-1})² / Σ e_t²`` (≈ 2 for white residuals).

    Parameters
    ----------
    residuals : ndarray, shape (n,)
        Residuals; NaN samples are dropped (gaps are closed up).

    Returns
    -------
    float
    """
    e = np.asarray(residuals, dtype=float)
    e = e[np.isfinite(e)]
    return float(np.sum(np.diff(e) ** 2) / np.sum(e * e))


def ljung_box(residuals: np.ndarray, lags: int, *, n_params: int = 0) -> tuple[float, float]:
    """Ljung-Box portmanteau test of residual autocorrelation up to ``lags``.

    Parameters
    ----------
    residuals : ndarray, shape (n,)
        Residuals; NaN samples are dropped (gaps closed up).
    lags : int
        Number of autocorrelations tested.
    n_params : int, default=0
        Fitted ARMA parameters subtracted from the degrees of freedom.

    Returns
    -------
    q : float
        ``Q = n (n + 2) Σ_{k=1}^{h} ρ_k² / (n - k)``.
    p : float
        ``P(χ²_{h - n_params} > Q)``.

    Notes
    -----
    Ljung & Box (1978), Biometrika 65:297-303 (formula recalled from memory; checked
    against ``statsmodels.stats.diagnostic.acorr_ljungbox`` in the tests).
    """
    e = np.asarray(residuals, dtype=float)
    e = e[np.isfinite(e)]
    n = e.size
    rho = acf(e, lags)[1:]
    q = float(n * (n + 2) * np.sum(rho**2 / (n - np.arange(1, lags + 1))))
    dof = lags - n_params
    p = float(stats.chi2.sf(q, dof)) if dof > 0 else np.nan
    return q, p


def r_squared(observed: np.ndarray, fitted: np.ndarray) -> float:
    """Coefficient of determination ``1 - SSR / SST`` over the finite samples.

    Parameters
    ----------
    observed, fitted : ndarray, shape (n,)

    Returns
    -------
    float
    """
    keep = np.isfinite(observed) & np.isfinite(fitted)
    y = observed[keep]
    ssr = np.sum((y - fitted[keep]) ** 2)
    sst = np.sum((y - y.mean()) ** 2)
    return float(1.0 - ssr / sst) if sst > 0 else np.nan


def variance_share(observed: np.ndarray, part: np.ndarray) -> float:
    """Share of a series' variance carried by one fitted component, ``var(part) / var(observed)``.

    Parameters
    ----------
    observed : ndarray, shape (n,)
        The flow series.
    part : ndarray, shape (n,)
        A fitted component (e.g. the short-channel columns times their betas).

    Returns
    -------
    float
        In [0, 1] for a well-behaved fit (can exceed 1 when components cancel).
    """
    keep = np.isfinite(observed) & np.isfinite(part)
    var = np.var(observed[keep])
    return float(np.var(part[keep]) / var) if var > 0 else np.nan
