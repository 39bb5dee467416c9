"""Shaping the group inputs: fstats.group.tables."""

import numpy as np
import pandas as pd
from numpy.testing import assert_allclose

from fstats.group.tables import average_runs


def _runs(se):
    return pd.DataFrame(
        {
            "subject": "sub-01",
            "channel": "frontal_a",
            "term": "subtract",
            "value": [1.0, 3.0],
            "value_se": se,
        }
    )


def test_average_runs_formulas():
    """Source: closed forms worked here - mean 2, se sqrt(1+4)/2 unweighted; inverse-variance
    mean (1*1 + 3/4)/(1 + 1/4) = 1.4 with se 1/sqrt(1.25)."""
    plain = average_runs(_runs([1.0, 2.0]), weighted=False).iloc[0]
    assert_allclose([plain["value"], plain["value_se"]], [2.0, np.sqrt(5) / 2])
    weighted = average_runs(_runs([1.0, 2.0]), weighted=True).iloc[0]
    assert_allclose([weighted["value"], weighted["value_se"]], [1.4, 1 / np.sqrt(1.25)])
    assert plain["n_runs"] == 2


def test_missing_se_stays_missing():
    """Source: common practice - a run without a standard error must not give se = 0."""
    row = average_runs(_runs([np.nan, 2.0]), weighted=False).iloc[0]
    assert row["value"] == 2.0 and np.isnan(row["value_se"])
