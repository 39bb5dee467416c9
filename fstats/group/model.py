"""Group models over a cohort's subject results: settings (GroupModel) and results (GroupResult).

``GroupModel(kind=..., weighting=..., correction=...).fit(subject_tables, participants)``
checks the inputs, records every left-out subject or row with its reason, runs one
test per channel × term (× coefficient for mixed models), controls the error rate
across the whole family and adds effect sizes, permutation p-values and a
leave-one-out influence check.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, fields

import numpy as np
import pandas as pd

from fstats.errors import InputError, suggest
from fstats.group._prepare import prepare_inputs
from fstats.group.mixed import MIXED_REFERENCES, fit_mixed, split_formula
from fstats.group.multiple import CORRECTIONS, adjust_pvalues
from fstats.group.permutation import sign_flip_test
from fstats.group.result import TABLE_COLUMNS, GroupResult
from fstats.group.summary import WEIGHTINGS, leave_one_out, summary_test
from fstats.group.tables import UNITS

__all__ = ["KINDS", "TABLE_COLUMNS", "GroupModel", "GroupResult"]

#: Group model kinds.
KINDS: tuple[str, ...] = ("one-sample", "two-sample", "paired", "interaction", "mixed")

_CHOICES = {
    "kind": KINDS,
    "weighting": WEIGHTINGS,
    "correction": CORRECTIONS,
    "units": UNITS,
    "mixed_reference": MIXED_REFERENCES,
}


@dataclass(frozen=True, eq=False)
class GroupModel:
    """How to pool subject results across a cohort (settings only, never data).

    Parameters
    ----------
    kind : {"one-sample", "two-sample", "paired", "interaction", "mixed"}, default="one-sample"
        ``one-sample``: mean of subject estimates against 0, per channel × term.
        ``two-sample``: ``groups[0] - groups[1]`` on the ``group_column`` of participants.tsv.
        ``paired``: ``pair[0] - pair[1]`` within subjects, tested against 0.
        ``interaction``: ``(pair[0] - pair[1])`` compared between the two groups.
        ``mixed``: linear mixed model over run-level estimates with a random intercept per
        subject and fixed effects from ``formula`` (statsmodels MixedLM, REML).
    formula : str, optional
        Mixed models only: e.g. ``"effect ~ group + age"`` (left side optional; columns of
        participants.tsv or ``session``).  Default ``"effect ~ 1"``.
    weighting : {"unweighted", "dersimonian-laird", "reml"}, default="unweighted"
        Summary models: unweighted t tests, or inverse-variance weights with the
        between-subject variance from DerSimonian–Laird or REML.
    correction : {"fdr", "holm", "bonferroni", "none"}, default="fdr"
        Multiple-comparison control across all rows of the table (channels × terms ×
        comparisons; intercepts of mixed models with other terms are left out).
    alpha : float, default=0.05
        Level for ``reject``, the confidence intervals and the influence check.
    units : {"percent", "raw"}, default="percent"
        Pool ``estimate_pct``/``se_pct`` (% change from baseline flow) or
        ``estimate``/``se`` (raw flow unit, cm²/s per unit regressor).
    terms : tuple of str, optional
        Subject-table terms to pool (default: task regressors and t contrasts).
    channels : tuple of str, optional
        Channels to pool (default: every long channel, plus short ones if ``include_short``).
    include_short : bool, default=False
    group_column : str, default="group"
        participants.tsv column holding the group label.
    groups : (str, str), optional
        The two groups compared, first minus second (default: the two labels found,
        sorted alphabetically; more than two labels is an error unless named).
    pair : (str, str), optional
        Paired and interaction models: the two terms compared within subjects.
    equal_variance : bool, default=False
        Two-group tests: pooled variance / shared tau2 (True) or Welch / separate tau2.
    knapp_hartung : bool, default=True
        Weighted models: Knapp–Hartung variance and t reference (False: normal reference).
    n_permutations : int, default=0
        One-sample and paired models: sign-flip permutation p-values with this many sign
        vectors (exact enumeration when ``2**n`` is not larger); 0 = off.
    max_statistic : bool, default=False
        Permutation p-values adjusted by the max-|t| distribution across the table's rows.
    seed : int, default=0
        Seed of the permutation generator when ``fit`` gets no ``rng``.
    influence : bool, default=True
        Leave-one-out influence check for the summary models.
    mixed_reference : {"t", "normal"}, default="t"
        Mixed models: t on ``n_subjects - n_fixed`` df, or the normal reference of
        statsmodels (anti-conservative with few subjects).

    Notes
    -----
    - Several runs of a subject: summary models average them first (plain mean with
      ``se = sqrt(Σ se²)/n_runs``, or the inverse-variance mean for weighted models);
      mixed models use every run as a row.
    - Paired and interaction models use the within-subject difference of the two terms'
      estimates with ``se = sqrt(se_a² + se_b²)``, which ignores the covariance of the
      two betas; a subject-level contrast term (pooled with ``one-sample``) avoids that.
    - ``effect_size`` is Hedges' g of the subject values with a noncentral-t interval
      (:mod:`fstats.group.effect_size`); descriptive, whatever the weighting; NaN for
      mixed models.
    - ``influential`` lists subjects whose removal moves the estimate by more than
      ``2/sqrt(n)`` of its leave-one-out SE (DFBETAS rule of Belsley, Kuh & Welsch 1980);
      summary models only.
    - ``p_permutation`` uses the unweighted one-sample t whatever the weighting.
    """

    kind: str = "one-sample"
    formula: str | None = None
    weighting: str = "unweighted"
    correction: str = "fdr"
    alpha: float = 0.05
    units: str = "percent"
    terms: tuple[str, ...] | None = None
    channels: tuple[str, ...] | None = None
    include_short: bool = False
    group_column: str = "group"
    groups: tuple[str, str] | None = None
    pair: tuple[str, str] | None = None
    equal_variance: bool = False
    knapp_hartung: bool = True
    n_permutations: int = 0
    max_statistic: bool = False
    seed: int = 0
    influence: bool = True
    mixed_reference: str = "t"

    def __post_init__(self) -> None:
        for name in ("terms", "channels", "groups", "pair"):  # YAML lists -> tuples
            value = getattr(self, name)
            if value is not None and not isinstance(value, tuple):
                if isinstance(value, str):
                    value = (value,)
                object.__setattr__(self, name, tuple(str(v) for v in value))
        for name, choices in _CHOICES.items():
            value = getattr(self, name)
            if value not in choices:
                raise InputError(
                    "group model",
                    name,
                    f"one of {list(choices)}",
                    value,
                    hint=suggest(str(value), choices),
                )
        if not 0 < self.alpha < 1:
            raise InputError("group model", "alpha", "a level between 0 and 1", self.alpha)
        if self.kind in ("paired", "interaction") and (
            self.pair is None or len(self.pair) != 2 or self.pair[0] == self.pair[1]
        ):
            raise InputError("group model", "pair", "two different terms to compare", self.pair)
        if self.groups is not None and (len(self.groups) != 2 or self.groups[0] == self.groups[1]):
            raise InputError("group model", "groups", "two different group labels", self.groups)
        if self.formula is not None and self.kind != "mixed":
            raise InputError(
                "group model", "formula", "a formula only with kind 'mixed'", self.formula
            )
        if self.n_permutations and self.kind not in ("one-sample", "paired"):
            raise InputError(
                "group model",
                "n_permutations",
                "sign flips only for one-sample or paired models",
                self.kind,
            )
        if self.n_permutations < 0:
            raise InputError("group model", "n_permutations", "a count >= 0", self.n_permutations)

    @property
    def two_groups(self) -> bool:
        """True when the model compares two groups of subjects."""
        return self.kind in ("two-sample", "interaction")

    @property
    def weighted(self) -> bool:
        """True for inverse-variance weighted summary models."""
        return self.weighting != "unweighted" and self.kind != "mixed"

    def describe(self) -> str:
        """A one-line statement of the model, e.g. for a report heading."""
        if self.kind == "mixed":
            lhs, rhs = split_formula(self.formula or "effect ~ 1")
            return f"{lhs} ~ {rhs} + (1 | participant)"
        weighting = (
            "unweighted"
            if self.weighting == "unweighted"
            else (f"weighted by 1/(se² + tau²), tau² by {self.weighting}")
        )
        what = {
            "one-sample": "mean subject estimate vs 0",
            "two-sample": f"difference of group means on '{self.group_column}'",
            "paired": f"within-subject difference {self.pair and ' - '.join(self.pair)} vs 0",
            "interaction": f"within-subject difference {self.pair and ' - '.join(self.pair)} "
            f"compared between groups on '{self.group_column}'",
        }[self.kind]
        return f"{what}, {weighting}"

    def settings(self) -> dict:
        """The settings as a JSON-ready dict."""
        out = {}
        for f in fields(self):
            value = getattr(self, f.name)
            out[f.name] = list(value) if isinstance(value, tuple) else value
        out["description"] = self.describe()
        return out

    def fit(
        self,
        subject_tables: pd.DataFrame,
        participants: pd.DataFrame | None = None,
        *,
        rng: np.random.Generator | None = None,
    ) -> GroupResult:
        """Pool the subject results of a cohort.

        Parameters
        ----------
        subject_tables : pandas.DataFrame
            Concatenated subject results tables (CONTRACTS §5 columns).
        participants : pandas.DataFrame, optional
            participants.tsv (``participant_id`` plus covariates); required for two-group
            and covariate models.
        rng : numpy.random.Generator, optional
            For Monte Carlo sign flips (default ``default_rng(self.seed)``).

        Returns
        -------
        GroupResult

        Raises
        ------
        InputError
            Missing columns, no matching participant IDs, a missing covariate column, a
            constant covariate, or a group with fewer than two subjects.
        """
        prepared = prepare_inputs(self, subject_tables, participants)
        rows: list[dict] = []
        subject_rows: list[pd.DataFrame] = []
        influence_rows: list[pd.DataFrame] = []
        perm_values: dict[int, pd.Series] = {}
        for unit in prepared.units:
            row = _base_row(self, unit, prepared)
            subject_rows.append(unit.subject_frame(self))
            if self.kind == "mixed":
                rows.extend(_mixed_rows(self, unit, row, prepared))
                continue
            problem = unit.too_few(self)
            if problem:
                row["status"] = problem
                rows.append(row)
                continue
            options = dict(
                weighting=self.weighting,
                equal_variance=self.equal_variance,
                knapp_hartung=self.knapp_hartung,
            )
            res = summary_test(unit.values, unit.ses, unit.in_first, alpha=self.alpha, **options)
            subject_rows[-1]["weight"] = res.pop("weights")
            row.update({k: v for k, v in res.items() if k in TABLE_COLUMNS})
            row.update(
                effect_size=res["hedges_g"],
                effect_size_ci_low=res["hedges_g_ci_low"],
                effect_size_ci_high=res["hedges_g_ci_high"],
            )
            if self.influence:
                loo = leave_one_out(
                    unit.values, unit.ses, unit.in_first, alpha=self.alpha, **options
                )
                frame = pd.DataFrame(
                    {
                        "channel": unit.channel,
                        "term": unit.term,
                        "comparison": unit.comparison,
                        "participant_id": unit.subjects,
                        "estimate_without": loo["estimate"],
                        "p_without": loo["p"],
                        "dfbetas": loo["dfbetas"],
                        "decision_changes": loo["decision_changes"],
                        "flagged": loo["flagged"],
                    }
                )
                influence_rows.append(frame)
                row["influential"] = "; ".join(np.asarray(unit.subjects)[loo["flagged"]])
            if self.n_permutations:
                perm_values[len(rows)] = pd.Series(unit.values, index=unit.subjects)
            rows.append(row)
        table = pd.DataFrame(rows, columns=list(TABLE_COLUMNS))
        info = dict(prepared.info)
        if perm_values:
            info["permutation"] = _permute(self, table, perm_values, rng)
        family = table["in_family"].astype(bool) & np.isfinite(table["p"].astype(float))
        adjusted = np.full(len(table), np.nan)
        adjusted[family.to_numpy()] = adjust_pvalues(
            table.loc[family, "p"].to_numpy(float), self.correction
        )
        table["p_adjusted"] = adjusted
        table["reject"] = np.where(np.isfinite(adjusted), adjusted <= self.alpha, False)
        info["family_size"] = int(family.sum())
        subjects = (
            pd.concat(subject_rows, ignore_index=True)
            if subject_rows
            else pd.DataFrame(columns=_SUBJECT_COLUMNS)
        )
        influence = (
            pd.concat(influence_rows, ignore_index=True)
            if influence_rows
            else pd.DataFrame(columns=_INFLUENCE_COLUMNS)
        )
        return GroupResult(
            model=self,
            rows=table,
            subject_estimates=subjects,
            exclusions=list(prepared.exclusions),
            influence=influence,
            settings=self.settings(),
            info=info,
        )


_SUBJECT_COLUMNS = (
    "channel",
    "term",
    "participant_id",
    "group",
    "estimate",
    "se",
    "n_runs",
    "weight",
    "units",
)
_INFLUENCE_COLUMNS = (
    "channel",
    "term",
    "comparison",
    "participant_id",
    "estimate_without",
    "p_without",
    "dfbetas",
    "decision_changes",
    "flagged",
)


def _base_row(model: GroupModel, unit, prepared) -> dict:
    row = dict.fromkeys(TABLE_COLUMNS, math.nan)
    excluded = prepared.excluded_for(unit.channel, unit.term)
    row.update(
        channel=unit.channel,
        term=unit.term,
        comparison=unit.comparison,
        model=model.kind,
        weighting="unweighted" if model.kind == "mixed" else model.weighting,
        units=prepared.unit_label,
        n_subjects=len(unit.subjects),
        influential="",
        n_excluded=len(excluded),
        excluded="; ".join(excluded),
        in_family=True,
        status="ok",
        reject=False,
        stat_kind="t",
    )
    if model.two_groups:
        a = np.asarray(unit.in_first, dtype=bool)
        row.update(
            group_a=prepared.groups[0],
            group_b=prepared.groups[1],
            n_a=int(a.sum()),
            n_b=int((~a).sum()),
            mean_a=float(np.mean(unit.values[a])) if a.any() else math.nan,
            mean_b=float(np.mean(unit.values[~a])) if (~a).any() else math.nan,
        )
    else:
        row.update(group_a="", group_b="")
    return row


def _mixed_rows(model: GroupModel, unit, base: dict, prepared) -> list[dict]:
    formula = model.formula or "effect ~ 1"
    if unit.runs is None or unit.runs["participant_id"].nunique() < 3:
        base.update(status=f"too few subjects ({len(unit.subjects)}) for a mixed model")
        return [base]
    try:
        res = fit_mixed(unit.runs, formula, alpha=model.alpha, reference=model.mixed_reference)
    except (ValueError, np.linalg.LinAlgError) as exc:
        base.update(status=f"mixed model failed: {exc}".split("\n")[0])
        return [base]
    out = []
    names = [c["name"] for c in res["coefficients"]]
    status = "ok" if res["converged"] else "mixed model did not converge"
    if not all(np.isfinite(c["se"]) for c in res["coefficients"]):
        status = "mixed model: standard errors not available (singular fit)"
    if res["warnings"]:
        status += "; " + "; ".join(res["warnings"])
    for coef in res["coefficients"]:
        row = dict(base)
        row.update({k: coef[k] for k in ("estimate", "se", "stat", "df", "p", "ci_low", "ci_high")})
        row.update(
            comparison=coef["name"],
            stat_kind="z",
            tau2=res["tau2"],
            status=status,
            in_family=coef["name"] != "Intercept" or len(names) == 1,
        )
        out.append(row)
    return out


def _permute(model: GroupModel, table: pd.DataFrame, values: dict, rng) -> dict:
    rng = rng if rng is not None else np.random.default_rng(model.seed)
    matrix = pd.DataFrame(values)  # subjects x rows, NaN where a subject is missing
    res = sign_flip_test(
        matrix.to_numpy(float),
        n_permutations=model.n_permutations,
        rng=rng,
        max_statistic=model.max_statistic,
    )
    index = list(matrix.columns)
    table.loc[index, "p_permutation"] = res.p
    if model.max_statistic:
        table.loc[index, "p_permutation_adjusted"] = res.p_max
    else:
        table.loc[index, "p_permutation_adjusted"] = adjust_pvalues(res.p, model.correction)
    return {
        "n_flips": res.n_flips,
        "exact": res.exact,
        "max_statistic": model.max_statistic,
        "statistic": "unweighted one-sample t",
    }
