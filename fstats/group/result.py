"""The result of a group model: the tidy table, subject estimates, exclusions, influence."""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import TYPE_CHECKING

import pandas as pd

if TYPE_CHECKING:
    from fstats.group.model import GroupModel

__all__ = ["TABLE_COLUMNS", "GroupResult"]

#: Columns of the tidy group table, in order.
TABLE_COLUMNS: tuple[str, ...] = (
    "channel",
    "term",
    "comparison",
    "model",
    "weighting",
    "units",
    "estimate",
    "se",
    "stat",
    "stat_kind",
    "df",
    "p",
    "p_adjusted",
    "reject",
    "ci_low",
    "ci_high",
    "effect_size",
    "effect_size_ci_low",
    "effect_size_ci_high",
    "cohens_d",
    "n_subjects",
    "group_a",
    "group_b",
    "n_a",
    "n_b",
    "mean_a",
    "mean_b",
    "tau2",
    "i2",
    "p_permutation",
    "p_permutation_adjusted",
    "influential",
    "n_excluded",
    "excluded",
    "in_family",
    "status",
)


@dataclass(frozen=True, eq=False)
class GroupResult:
    """The outcome of a group model.

    Attributes
    ----------
    model : GroupModel
        The settings that produced it.
    rows : pandas.DataFrame
        The tidy group table (:data:`TABLE_COLUMNS`); use :meth:`table` for a copy.
    subject_estimates : pandas.DataFrame
        Per-subject values that entered each test (for forest plots): ``channel, term,
        participant_id, group, estimate, se, n_runs, weight, units``.
    exclusions : list of dict
        Every left-out subject or row: ``participant_id``, ``reason`` and, where it
        applies, ``channel``, ``term``, ``session`` ("" = all).
    influence : pandas.DataFrame
        Leave-one-out results per test and subject (summary models).
    settings : dict
        ``model.settings()``.
    info : dict
        Counts and notes (subjects used, family size, permutation settings).
    """

    model: GroupModel
    rows: pd.DataFrame
    subject_estimates: pd.DataFrame
    exclusions: list = field(default_factory=list)
    influence: pd.DataFrame = field(default_factory=pd.DataFrame)
    settings: dict = field(default_factory=dict)
    info: dict = field(default_factory=dict)

    def table(self) -> pd.DataFrame:
        """The tidy group table (a copy), one row per channel × term × comparison."""
        return self.rows.copy()
