"""t and F inference on fitted coefficients: standard errors, p-values, confidence intervals."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import stats

__all__ = ["TermTest", "t_test", "f_test"]


@dataclass(frozen=True, eq=False)
class TermTest:
    """One tested quantity (a regressor, a t contrast or an F test).

    Parameters
    ----------
    estimate : float
        ``c'β`` (flow unit per regressor unit); NaN for an F test.
    se : float
        Standard error of ``c'β``; NaN for an F test.
    stat : float
        t or F statistic.
    df : float
        Effective residual degrees of freedom (denominator df for F).
    p : float
        Two-sided p for t, upper-tail p for F.
    ci_low, ci_high : float
        ``1 - alpha`` confidence interval of ``c'β`` (NaN for F).
    df_num : int
        Numerator degrees of freedom (1 for t).
    """

    estimate: float
    se: float
    stat: float
    df: float
    p: float
    ci_low: float
    ci_high: float
    df_num: int = 1


def t_test(
    betas: np.ndarray, cov: np.ndarray, weights: np.ndarray, dof: float, *, alpha: float = 0.05
) -> TermTest:
    """t test of one linear combination ``c'β``.

    Parameters
    ----------
    betas : ndarray, shape (k,)
    cov : ndarray, shape (k, k)
    weights : ndarray, shape (k,)
        Contrast weights ``c``.
    dof : float
        Degrees of freedom of the t reference distribution.
    alpha : float, default=0.05
        Confidence interval level ``1 - alpha``.

    Returns
    -------
    TermTest

    Notes
    -----
    ``t = c'β / sqrt(c' Σ c)``, ``p = 2 P(T_df > |t|)``, CI ``c'β ± t_{df,1-α/2} SE``.
    """
    c = np.asarray(weights, dtype=float)
    estimate = float(c @ betas)
    var = float(c @ cov @ c)
    se = float(np.sqrt(var)) if var > 0 else np.nan
    stat = estimate / se if se > 0 else np.nan
    p = float(2.0 * stats.t.sf(abs(stat), dof)) if np.isfinite(stat) else np.nan
    half = float(stats.t.ppf(1.0 - alpha / 2.0, dof) * se) if np.isfinite(se) else np.nan
    return TermTest(estimate, se, stat, float(dof), p, estimate - half, estimate + half)


def f_test(betas: np.ndarray, cov: np.ndarray, weights: np.ndarray, dof: float) -> TermTest:
    """F test of the joint hypothesis ``C β = 0``.

    Parameters
    ----------
    betas : ndarray, shape (k,)
    cov : ndarray, shape (k, k)
    weights : ndarray, shape (q, k)
        Contrast rows ``C`` (linearly independent).
    dof : float
        Denominator degrees of freedom.

    Returns
    -------
    TermTest
        ``F = (Cβ)' (C Σ C')^-1 (Cβ) / q``, ``p = P(F_{q,df} > F)``.
    """
    c = np.atleast_2d(np.asarray(weights, dtype=float))
    q = c.shape[0]
    effect = c @ betas
    middle = c @ cov @ c.T
    try:
        stat = float(effect @ np.linalg.solve(middle, effect) / q)
    except np.linalg.LinAlgError:
        stat = np.nan
    p = float(stats.f.sf(stat, q, dof)) if np.isfinite(stat) else np.nan
    return TermTest(np.nan, np.nan, stat, float(dof), p, np.nan, np.nan, df_num=q)
