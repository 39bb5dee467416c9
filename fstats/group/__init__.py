"""Group stage: inference across subjects, multiple-comparison control.

``GroupModel(...).fit(subject_tables, participants)`` pools the subject results
tables of a cohort (one-sample, two-sample, paired, interaction or mixed models),
and :func:`write_group_results` writes the tidy table and its JSON sidecar.
"""

from fstats.group.effect_size import hedges_correction, noncentral_t_interval
from fstats.group.mixed import fit_mixed, formula_variables
from fstats.group.model import KINDS, GroupModel
from fstats.group.multiple import CORRECTIONS, adjust_pvalues, bonferroni, fdr_bh, holm
from fstats.group.permutation import SignFlipResult, sign_flip_test
from fstats.group.pooling import (
    PooledFit,
    pool_random_effects,
    tau2_dersimonian_laird,
    tau2_reml,
)
from fstats.group.result import TABLE_COLUMNS, GroupResult
from fstats.group.summary import WEIGHTINGS, leave_one_out, summary_test
from fstats.group.tables import SUBJECT_COLUMNS, UNITS
from fstats.group.ttests import one_sample_t, two_sample_t
from fstats.group.writing import GROUP_FILES, read_group_table, write_group_results

__all__ = [
    "CORRECTIONS",
    "GROUP_FILES",
    "KINDS",
    "SUBJECT_COLUMNS",
    "TABLE_COLUMNS",
    "UNITS",
    "WEIGHTINGS",
    "GroupModel",
    "GroupResult",
    "PooledFit",
    "SignFlipResult",
    "adjust_pvalues",
    "bonferroni",
    "fdr_bh",
    "fit_mixed",
    "formula_variables",
    "hedges_correction",
    "holm",
    "leave_one_out",
    "noncentral_t_interval",
    "one_sample_t",
    "pool_random_effects",
    "read_group_table",
    "sign_flip_test",
    "summary_test",
    "tau2_dersimonian_laird",
    "tau2_reml",
    "two_sample_t",
    "write_group_results",
]
