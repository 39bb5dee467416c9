"""Standardised effect sizes (Cohen's d, Hedges' g) with noncentral-t intervals."""

from __future__ import annotations

import math

import numpy as np
from scipy import optimize, special, stats

__all__ = ["hedges_correction", "noncentral_t_interval", "one_sample_effect", "two_sample_effect"]


def hedges_correction(df: float) -> float:
    """Hedges' exact small-sample bias factor ``J(df)`` (unitless, < 1).

    ``J(df) = Γ(df/2) / (√(df/2) Γ((df-1)/2))``; ``g = J d`` is unbiased for the
    population standardised difference.  ``1 - 3/(4 df - 1)`` is its usual approximation.

    References
    ----------
    Hedges LV (1981). Distribution theory for Glass's estimator of effect size and
    related estimators. J Educ Stat 6(2):107-128.
    """
    if not df > 1:
        return math.nan
    return float(
        math.exp(special.gammaln(df / 2) - special.gammaln((df - 1) / 2)) / math.sqrt(df / 2)
    )


def noncentral_t_interval(t: float, df: float, *, alpha: float = 0.05) -> tuple[float, float]:
    """Confidence interval for the noncentrality parameter of an observed t.

    Parameters
    ----------
    t : float
        Observed t statistic.
    df : float
        Its degrees of freedom.
    alpha : float, default=0.05

    Returns
    -------
    (low, high) : tuple of float
        Noncentrality values ``λ`` with ``P(T <= t | λ_low) = 1 - alpha/2`` and
        ``P(T <= t | λ_high) = alpha/2`` (test inversion, ``T ~ nct(df, λ)``).

    References
    ----------
    Steiger JH, Fouladi RT (1997). Noncentrality interval estimation and the evaluation
    of statistical models. In: What if there were no significance tests? (pp. 221-257).
    Cumming G, Finch S (2001). Educ Psychol Meas 61(4):532-574.
    """
    if not (np.isfinite(t) and df > 0):
        return math.nan, math.nan
    if t < 0:  # P(T <= t | λ) = P(T >= -t | -λ): solve for |t| (avoids cdf underflow)
        low, high = noncentral_t_interval(-t, df, alpha=alpha)
        return -high, -low

    def root(target):
        def f(ncp):
            return stats.nct.cdf(t, df, ncp) - target

        step = 2.0 + 0.5 * t
        lo, hi = t - step, t + step
        while f(lo) < 0:
            lo -= step
        while f(hi) > 0:
            hi += step
        return float(optimize.brentq(f, lo, hi, xtol=1e-12))

    return root(1 - alpha / 2), root(alpha / 2)


def one_sample_effect(values: np.ndarray, *, alpha: float = 0.05) -> dict[str, float]:
    """Cohen's d (mean / sd) and Hedges' g for one sample or paired differences.

    Parameters
    ----------
    values : ndarray, shape (n,)
        Subject estimates or within-subject differences.
    alpha : float, default=0.05

    Returns
    -------
    dict
        ``cohens_d``, ``hedges_g``, and ``hedges_g_ci_low``/``hedges_g_ci_high``: the
        noncentral-t interval for δ (``λ / √n``, ``t = d √n`` on ``n - 1`` df), scaled by
        ``J(n - 1)`` like the point estimate.
    """
    x = np.asarray(values, dtype=float)
    n = x.size
    sd = float(np.std(x, ddof=1)) if n > 1 else math.nan
    if not (n > 2 and sd > 0):
        return dict.fromkeys(
            ("cohens_d", "hedges_g", "hedges_g_ci_low", "hedges_g_ci_high"), math.nan
        )
    d = float(np.mean(x)) / sd
    df = n - 1
    low, high = noncentral_t_interval(d * math.sqrt(n), df, alpha=alpha)
    j = hedges_correction(df)
    return {
        "cohens_d": d,
        "hedges_g": j * d,
        "hedges_g_ci_low": j * low / math.sqrt(n),
        "hedges_g_ci_high": j * high / math.sqrt(n),
    }


def two_sample_effect(first: np.ndarray, second: np.ndarray, *, alpha: float = 0.05) -> dict:
    """Cohen's d with the pooled sd and Hedges' g for ``first - second``.

    Parameters
    ----------
    first, second : ndarray, shape (n1,), (n2,)
    alpha : float, default=0.05

    Returns
    -------
    dict
        ``cohens_d = (m1 - m2) / s_pooled``, ``hedges_g = J(n1 + n2 - 2) d`` and its
        noncentral-t interval (``t = d / √(1/n1 + 1/n2)``, ``n1 + n2 - 2`` df), scaled by
        ``J``.  The pooled sd is used even when the test itself is Welch's.
    """
    a = np.asarray(first, dtype=float)
    b = np.asarray(second, dtype=float)
    n1, n2 = a.size, b.size
    keys = ("cohens_d", "hedges_g", "hedges_g_ci_low", "hedges_g_ci_high")
    if n1 < 2 or n2 < 2 or n1 + n2 < 4:
        return dict.fromkeys(keys, math.nan)
    df = n1 + n2 - 2
    sp = math.sqrt(((n1 - 1) * np.var(a, ddof=1) + (n2 - 1) * np.var(b, ddof=1)) / df)
    if not sp > 0:
        return dict.fromkeys(keys, math.nan)
    d = float(np.mean(a) - np.mean(b)) / sp
    factor = math.sqrt(1 / n1 + 1 / n2)
    low, high = noncentral_t_interval(d / factor, df, alpha=alpha)
    j = hedges_correction(df)
    return {
        "cohens_d": d,
        "hedges_g": j * d,
        "hedges_g_ci_low": j * low * factor,
        "hedges_g_ci_high": j * high * factor,
    }
