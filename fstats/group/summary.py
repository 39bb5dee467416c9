"""Summary-statistics group tests on one number per subject, and their influence check.

One function runs the test a group model asks for (one-sample or two-sample,
unweighted or random-effects weighted) on arrays of subject estimates; another
repeats it leaving out each subject in turn.
"""

from __future__ import annotations

import math

import numpy as np

from fstats.group.effect_size import one_sample_effect, two_sample_effect
from fstats.group.pooling import pool_random_effects
from fstats.group.ttests import one_sample_t, two_sample_t

__all__ = ["WEIGHTINGS", "summary_test", "leave_one_out"]

#: Subject weighting of the summary-statistics models.
WEIGHTINGS: tuple[str, ...] = ("unweighted", "dersimonian-laird", "reml")

_NO_EFFECT = dict.fromkeys(
    ("cohens_d", "hedges_g", "hedges_g_ci_low", "hedges_g_ci_high"), math.nan
)


def summary_test(
    values: np.ndarray,
    ses: np.ndarray,
    in_first: np.ndarray | None = None,
    *,
    weighting: str = "unweighted",
    equal_variance: bool = False,
    knapp_hartung: bool = True,
    alpha: float = 0.05,
    effect_sizes: bool = True,
) -> dict:
    """Group test on subject estimates.

    Parameters
    ----------
    values : ndarray, shape (n,)
        One estimate per subject (% or cm²/s).
    ses : ndarray, shape (n,)
        Their standard errors (same unit); used only by the weighted models.
    in_first : ndarray of bool, shape (n,), optional
        Two-sample test of first − second group when given; one-sample test of mean 0
        when omitted.
    weighting : {"unweighted", "dersimonian-laird", "reml"}, default="unweighted"
        Unweighted t tests, or inverse-variance weights ``1/(se² + tau2)`` with tau2
        from the named estimator.
    equal_variance : bool, default=False
        Two-sample only.  Unweighted: pooled-variance (True) or Welch (False) t test.
        Weighted: one tau2 shared by both groups (a meta-regression on a group
        indicator, True) or each group pooled with its own tau2 and the difference
        tested with ``se = sqrt(se1² + se2²)`` (False; with Knapp–Hartung the df follow
        Welch–Satterthwaite from the two group variances and their ``k - 1`` df).
    knapp_hartung : bool, default=True
        Weighted models: Knapp–Hartung covariance and t reference (else normal).
    alpha : float, default=0.05
    effect_sizes : bool, default=True
        Add Cohen's d and Hedges' g with its interval (NaN when False).

    Returns
    -------
    dict
        ``estimate, se, stat, stat_kind ("t"|"z"), df, p, ci_low, ci_high, tau2, i2``,
        the effect sizes of :mod:`fstats.group.effect_size` and ``weights`` (relative
        weight of each subject, shape (n,), summing to 1 within each group).
    """
    y = np.asarray(values, dtype=float)
    s = np.asarray(ses, dtype=float)
    out: dict = {"tau2": math.nan, "i2": math.nan}
    if in_first is None:
        effects = one_sample_effect(y, alpha=alpha) if effect_sizes else _NO_EFFECT
        if weighting == "unweighted":
            out.update(one_sample_t(y, alpha=alpha))
            weights = np.full(y.size, 1.0 / y.size)
        else:
            fit = pool_random_effects(
                y, s**2, method=_method(weighting), knapp_hartung=knapp_hartung
            )
            out.update(fit.test(0, alpha=alpha), tau2=fit.tau2, i2=fit.i2)
            weights = fit.weights / fit.weights.sum()
    else:
        a = np.asarray(in_first, dtype=bool)
        effects = two_sample_effect(y[a], y[~a], alpha=alpha) if effect_sizes else _NO_EFFECT
        weights = np.where(a, 1.0 / max(a.sum(), 1), 1.0 / max((~a).sum(), 1))
        if weighting == "unweighted":
            out.update(two_sample_t(y[a], y[~a], equal_variance=equal_variance, alpha=alpha))
        elif equal_variance:
            design = np.column_stack([np.ones(y.size), a.astype(float)])
            fit = pool_random_effects(
                y, s**2, design, method=_method(weighting), knapp_hartung=knapp_hartung
            )
            out.update(fit.test(1, alpha=alpha), tau2=fit.tau2, i2=fit.i2)
            weights = np.empty(y.size)
            for mask in (a, ~a):
                weights[mask] = fit.weights[mask] / fit.weights[mask].sum()
        else:
            res = _separate_groups(y, s, a, weighting, knapp_hartung, alpha)
            tau2_a, tau2_b = res.pop("_tau2_a"), res.pop("_tau2_b")
            out.update(res)
            weights = np.empty(y.size)
            for mask, tau2 in ((a, tau2_a), (~a, tau2_b)):
                w = 1.0 / (s[mask] ** 2 + tau2)
                weights[mask] = w / w.sum()
    out["stat_kind"] = "t" if np.isfinite(out["df"]) else "z"
    out.update(effects if effect_sizes else dict.fromkeys(effects, math.nan))
    out["weights"] = weights
    return out


def _method(weighting: str) -> str:
    if weighting not in WEIGHTINGS[1:]:
        raise ValueError(f"unknown weighting {weighting!r}; choose one of {WEIGHTINGS}")
    return weighting


def _separate_groups(y, s, a, weighting, knapp_hartung, alpha):
    from scipy import stats

    fits = [
        pool_random_effects(y[m], s[m] ** 2, method=_method(weighting), knapp_hartung=knapp_hartung)
        for m in (a, ~a)
    ]
    var = [float(f.cov[0, 0]) for f in fits]
    estimate = float(fits[0].coef[0] - fits[1].coef[0])
    se = math.sqrt(var[0] + var[1])
    if knapp_hartung:
        df = (var[0] + var[1]) ** 2 / (var[0] ** 2 / fits[0].df + var[1] ** 2 / fits[1].df)
        dist = stats.t(df)
    else:
        df, dist = math.inf, stats.norm()
    stat = estimate / se if se > 0 else math.nan
    crit = float(dist.ppf(1 - alpha / 2))
    return {
        "estimate": estimate,
        "se": se,
        "stat": stat,
        "df": float(df),
        "p": float(2 * dist.sf(abs(stat))) if np.isfinite(stat) else math.nan,
        "ci_low": estimate - crit * se,
        "ci_high": estimate + crit * se,
        "_tau2_a": fits[0].tau2,
        "_tau2_b": fits[1].tau2,
    }


def leave_one_out(
    values: np.ndarray,
    ses: np.ndarray,
    in_first: np.ndarray | None = None,
    *,
    alpha: float = 0.05,
    **options,
) -> dict[str, np.ndarray]:
    """Repeat :func:`summary_test` without each subject in turn.

    Parameters
    ----------
    values, ses, in_first, alpha, **options
        As for :func:`summary_test`.

    Returns
    -------
    dict of ndarray, shape (n,)
        ``estimate`` and ``p`` without subject i; ``dfbetas`` =
        ``(estimate_all - estimate_without_i) / se_without_i``; ``decision_changes``
        (significance at ``alpha``, uncorrected, differs from the full fit; reported,
        not used for the flag, since near ``alpha`` almost any removal flips it);
        ``flagged`` = ``|dfbetas| > 2/sqrt(n)``.  NaN/False where the test is
        impossible without subject i (a group would drop below 2).

    Notes
    -----
    The 2/√n cut-off is Belsley, Kuh & Welsch's size-adjusted rule for DFBETAS
    (Regression Diagnostics, Wiley 1980).  For a plain mean it flags a subject whose
    estimate lies more than about 2 sd from the others' mean.
    """
    y = np.asarray(values, dtype=float)
    s = np.asarray(ses, dtype=float)
    n = y.size
    full = summary_test(y, s, in_first, alpha=alpha, effect_sizes=False, **options)
    est = np.full(n, np.nan)
    p = np.full(n, np.nan)
    dfbetas = np.full(n, np.nan)
    for i in range(n):
        keep = np.arange(n) != i
        sub = None if in_first is None else np.asarray(in_first, dtype=bool)[keep]
        if (sub is None and keep.sum() < 3) or (
            sub is not None and (sub.sum() < 2 or (~sub).sum() < 2)
        ):
            continue
        try:
            res = summary_test(y[keep], s[keep], sub, alpha=alpha, effect_sizes=False, **options)
        except (ValueError, np.linalg.LinAlgError):
            continue
        est[i], p[i] = res["estimate"], res["p"]
        if res["se"] > 0:
            dfbetas[i] = (full["estimate"] - res["estimate"]) / res["se"]
    valid = np.isfinite(p)
    changes = valid & ((p < alpha) != (full["p"] < alpha))
    flagged = np.abs(np.nan_to_num(dfbetas)) > 2 / math.sqrt(n)
    return {
        "estimate": est,
        "p": p,
        "dfbetas": dfbetas,
        "decision_changes": changes,
        "flagged": flagged,
    }
