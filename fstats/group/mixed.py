"""Linear mixed-effects group models (random intercept per subject) via statsmodels.

Used when subjects have several runs or sessions: every run's estimate is one row,
covariates come from participants.tsv, and a random intercept per subject absorbs
the between-subject variance, e.g. ``effect ~ group + age``.
"""

from __future__ import annotations

import re
import warnings

import numpy as np
import pandas as pd
from scipy import stats

__all__ = ["RESPONSE_NAME", "MIXED_REFERENCES", "formula_variables", "split_formula", "fit_mixed"]

#: Reference distributions for the Wald statistics of a mixed model: "t" on
#: n_subjects - n_fixed degrees of freedom, or "normal" (statsmodels' own p-values).
MIXED_REFERENCES: tuple[str, ...] = ("t", "normal")

#: Default name of the response on the left of a group formula.
RESPONSE_NAME = "effect"

# Words of the formula language that are functions or contrast codings, not columns.
_FORMULA_WORDS = frozenset(
    {
        "C",
        "I",
        "Q",
        "np",
        "log",
        "exp",
        "sqrt",
        "center",
        "standardize",
        "scale",
        "bs",
        "cr",
        "Treatment",
        "Sum",
        "Diff",
        "Helmert",
        "Poly",
        "levels",
        "reference",
        "Intercept",
    }
)


def split_formula(formula: str) -> tuple[str, str]:
    """The response name and right-hand side of a group formula.

    ``"group + age"`` (no ``~``) means ``"effect ~ group + age"``.
    """
    if "~" in formula:
        lhs, rhs = formula.split("~", 1)
        lhs = lhs.strip() or RESPONSE_NAME
    else:
        lhs, rhs = RESPONSE_NAME, formula
    rhs = rhs.strip()
    if not rhs:
        rhs = "1"
    return lhs, rhs


def formula_variables(formula: str) -> tuple[str, ...]:
    """Column names used on the right-hand side of a formula, in order of appearance.

    Function names (``C(...)``, ``np.log(...)``), contrast codings and numbers are
    skipped; quoted strings are ignored.
    """
    _, rhs = split_formula(formula)
    rhs = re.sub(r"(['\"]).*?\1", " ", rhs)
    names: list[str] = []
    for match in re.finditer(r"[A-Za-z_][A-Za-z0-9_.]*", rhs):
        word = match.group(0)
        following = rhs[match.end() :].lstrip()[:1]
        if following == "(" or word in _FORMULA_WORDS or word.split(".")[0] == "np":
            continue
        if word not in names:
            names.append(word)
    return tuple(names)


def fit_mixed(
    data: pd.DataFrame,
    formula: str,
    *,
    subject_column: str = "participant_id",
    alpha: float = 0.05,
    reml: bool = True,
    reference: str = "t",
) -> dict:
    """Fit a random-intercept linear mixed model to run-level estimates.

    Parameters
    ----------
    data : pandas.DataFrame
        One row per run: the response column (named as the formula's left side) in
        % or cm²/s, ``subject_column`` and every covariate used by the formula.
    formula : str
        Fixed effects, e.g. ``"effect ~ group + age"``.
    subject_column : str, default="participant_id"
        Grouping for the random intercept.
    alpha : float, default=0.05
    reml : bool, default=True
        Restricted maximum likelihood (True) or maximum likelihood.
    reference : {"t", "normal"}, default="t"
        Reference distribution of ``estimate / se``: Student t on
        ``n_subjects - n_fixed`` degrees of freedom (the between-subject residual df; a
        small-sample approximation for effects that vary between subjects), or the
        normal distribution, as statsmodels' ``MixedLMResults.pvalues``.

    Returns
    -------
    dict
        ``coefficients``: list of dicts (``name``, ``estimate``, ``se``, ``stat``,
        ``df`` (inf for the normal reference), ``p``, ``ci_low``, ``ci_high``);
        ``tau2`` (random-intercept variance), ``residual_variance``, ``converged``,
        ``warnings`` (texts raised by statsmodels during the fit), ``n_observations``,
        ``n_subjects``.

    Notes
    -----
    Wald tests with statsmodels' standard errors.  With few subjects the normal
    reference is anti-conservative (benchmarks/calibrate_group.py: 0.078 at alpha 0.05
    with 16 subjects); the t reference on ``n_subjects - n_fixed`` df corrects most of it.
    """
    import statsmodels.formula.api as smf

    lhs, rhs = split_formula(formula)
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        model = smf.mixedlm(f"{lhs} ~ {rhs}", data, groups=data[subject_column])
        fit = model.fit(reml=reml)
        fe_params, bse_fe = fit.fe_params, fit.bse_fe  # computed here so warnings are caught
    if reference not in MIXED_REFERENCES:
        raise ValueError(f"unknown reference {reference!r}; choose one of {MIXED_REFERENCES}")
    n_subjects = int(data[subject_column].nunique())
    df = float(n_subjects - len(model.exog_names)) if reference == "t" else np.inf
    if not df > 0:
        df = np.inf
    dist = stats.t(df) if np.isfinite(df) else stats.norm()
    crit = float(dist.ppf(1 - alpha / 2))
    rows = []
    for name in model.exog_names:
        estimate = float(fe_params[name])
        se = float(bse_fe[name])
        z = estimate / se if se > 0 else np.nan
        rows.append(
            {
                "name": name,
                "estimate": estimate,
                "se": se,
                "stat": float(z),
                "df": df,
                "p": float(2 * dist.sf(abs(z))) if np.isfinite(z) else np.nan,
                "ci_low": estimate - crit * se,
                "ci_high": estimate + crit * se,
            }
        )
    return {
        "coefficients": rows,
        "tau2": float(np.asarray(fit.cov_re)[0, 0]),
        "residual_variance": float(fit.scale),
        "converged": bool(getattr(fit, "converged", True)),
        "warnings": sorted({str(w.message).split("\n")[0] for w in caught}),
        "n_observations": int(model.nobs),
        "n_subjects": n_subjects,
    }
