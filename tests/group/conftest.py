"""Cohort fixtures for the group tests: subject results tables with the CONTRACTS §5 columns."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from fstats.group.tables import SUBJECT_COLUMNS

CHANNELS = (("scalp", 1.0, True), ("frontal_a", 3.0, False), ("frontal_b", 3.0, False))


def make_cohort(
    rng: np.random.Generator,
    *,
    n_per_group: int = 8,
    groups: tuple[str, ...] = ("older", "younger"),
    effect_pct: dict | None = None,
    group_shift_pct: float = 0.0,
    tau_pct: float = 4.0,
    se_pct: float = 3.0,
    runs: int = 1,
    terms: tuple[str, ...] = ("subtract", "recover"),
) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Subject tables (one row per subject x run x channel x term) and participants.

    True subject effect = effect_pct[channel] * (term factor) + group shift (first group)
    + N(0, tau); each run adds N(0, se_i) with heteroscedastic se_i.
    """
    effect_pct = effect_pct or {"scalp": 5.0, "frontal_a": 15.0, "frontal_b": 0.0}
    term_factor = {"subtract": 1.0, "recover": 0.4, "subtract_vs_recover": 0.6}
    rows = []
    participants = []
    k = 0
    for g_index, group in enumerate(groups):
        for _ in range(n_per_group):
            k += 1
            pid = f"sub-{k:02d}"
            participants.append(
                {
                    "participant_id": pid,
                    "group": group,
                    "age": float(rng.uniform(20, 80)),
                    "sex": "F" if k % 2 else "M",
                }
            )
            for channel, sep, short in CHANNELS:
                for term in terms:
                    true = effect_pct[channel] * term_factor.get(term, 1.0)
                    if g_index == 0:
                        true += group_shift_pct
                    subject_true = true + rng.normal(0, tau_pct)
                    for run in range(runs):
                        se = se_pct * float(np.exp(rng.normal(0, 0.3)))
                        est = subject_true + rng.normal(0, se)
                        base = 2.0e-8  # cm²/s baseline flow
                        rows.append(
                            {
                                "subject": pid,
                                "session": f"{run + 1}" if runs > 1 else None,
                                "channel": channel,
                                "separation_cm": sep,
                                "is_short": short,
                                "term": term,
                                "term_kind": "regressor",
                                "condition": term,
                                "estimate": est / 100 * base,
                                "se": se / 100 * base,
                                "estimate_pct": est,
                                "se_pct": se,
                                "stat": est / se,
                                "df": 900.0,
                                "p": np.nan,
                                "ci_low": np.nan,
                                "ci_high": np.nan,
                                "ci_low_pct": est - 1.96 * se,
                                "ci_high_pct": est + 1.96 * se,
                                "ar_order": 3,
                                "method": "ar-irls",
                                "status": "ok",
                            }
                        )
    tables = pd.DataFrame(rows, columns=list(SUBJECT_COLUMNS))
    return tables, pd.DataFrame(participants)


@pytest.fixture
def cohort():
    return make_cohort(np.random.default_rng(7))


@pytest.fixture
def cohort_factory():
    """The cohort builder itself, for tests that need other sizes or several runs."""
    return make_cohort
