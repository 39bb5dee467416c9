"""Unweighted t tests on subject estimates (the summary-statistics approach).

Each subject contributes one number (its estimate, averaged over runs); the spread
of those numbers carries both within- and between-subject variance, so the test is
valid whatever the subject-level noise, provided subjects are independent.
"""

from __future__ import annotations

import numpy as np
from scipy import special

__all__ = ["one_sample_t", "two_sample_t"]


def _result(estimate, se, df, alpha):
    stat = estimate / se if se > 0 else np.nan
    # scipy.special.stdtr/stdtrit: Student t cdf and its inverse (what scipy.stats.t uses)
    p = float(2 * special.stdtr(df, -abs(stat))) if np.isfinite(stat) else np.nan
    crit = float(special.stdtrit(df, 1 - alpha / 2)) if df > 0 else np.nan
    return {
        "estimate": float(estimate),
        "se": float(se),
        "stat": float(stat),
        "df": float(df),
        "p": p,
        "ci_low": float(estimate - crit * se),
        "ci_high": float(estimate + crit * se),
    }


def one_sample_t(values: np.ndarray, *, alpha: float = 0.05) -> dict[str, float]:
    """One-sample t test of the mean against zero.

    Parameters
    ----------
    values : ndarray, shape (n,)
        Subject estimates (finite), e.g. % flow change.
    alpha : float, default=0.05
        1 - confidence level of the interval.

    Returns
    -------
    dict
        ``estimate`` (mean), ``se`` = sd/√n (ddof 1), ``stat`` = t, ``df`` = n - 1,
        two-sided ``p``, ``ci_low``/``ci_high``.
    """
    x = np.asarray(values, dtype=float)
    n = x.size
    if n < 2:
        raise ValueError(f"a one-sample t test needs at least 2 values, got {n}")
    se = float(np.std(x, ddof=1) / np.sqrt(n))
    return _result(float(np.mean(x)), se, n - 1, alpha)


def two_sample_t(
    first: np.ndarray, second: np.ndarray, *, equal_variance: bool = False, alpha: float = 0.05
) -> dict[str, float]:
    """Two-sample t test of ``mean(first) - mean(second)``.

    Parameters
    ----------
    first, second : ndarray, shape (n1,), (n2,)
        Subject estimates of the two groups, each with at least 2 values.
    equal_variance : bool, default=False
        False: Welch's test (separate variances, Welch–Satterthwaite df).
        True: Student's test with the pooled variance and ``n1 + n2 - 2`` df.
    alpha : float, default=0.05

    Returns
    -------
    dict
        ``estimate``, ``se``, ``stat``, ``df``, ``p``, ``ci_low``, ``ci_high``.

    References
    ----------
    Welch BL (1947). The generalization of "Student's" problem when several different
    population variances are involved. Biometrika 34:28-35.
    """
    a = np.asarray(first, dtype=float)
    b = np.asarray(second, dtype=float)
    n1, n2 = a.size, b.size
    if n1 < 2 or n2 < 2:
        raise ValueError(f"each group needs at least 2 values, got {n1} and {n2}")
    va, vb = np.var(a, ddof=1), np.var(b, ddof=1)
    estimate = float(np.mean(a) - np.mean(b))
    if equal_variance:
        pooled = ((n1 - 1) * va + (n2 - 1) * vb) / (n1 + n2 - 2)
        se = float(np.sqrt(pooled * (1 / n1 + 1 / n2)))
        df = float(n1 + n2 - 2)
    else:
        ga, gb = va / n1, vb / n2
        se = float(np.sqrt(ga + gb))
        df = float((ga + gb) ** 2 / (ga**2 / (n1 - 1) + gb**2 / (n2 - 1))) if se > 0 else np.nan
    return _result(estimate, se, df, alpha)
