"""Small calibration of the two-group tests (the full run is benchmarks/calibrate_group.py)."""

import numpy as np
import pytest

from fstats.group.summary import summary_test


def _cohort(rng, n_per_group=8, diff=0.0, tau=4.0, se_median=2.5):
    """Subject estimates: group mean + N(0, tau) + N(0, se_i), se_i log-normal (heteroscedastic)."""
    se = se_median * np.exp(rng.normal(0, 0.5, size=2 * n_per_group))
    mean = np.repeat([15.0 + diff, 15.0], n_per_group)
    values = mean + rng.normal(0, tau, size=mean.size) + rng.normal(0, se)
    return values, se, np.repeat([True, False], n_per_group)


@pytest.mark.parametrize(
    "options",
    [
        dict(weighting="unweighted"),
        dict(weighting="unweighted", equal_variance=True),
        dict(weighting="dersimonian-laird"),
        dict(weighting="reml"),
    ],
    ids=["welch", "pooled", "dl-hk", "reml-hk"],
)
def test_two_group_false_positive_rate(options):
    """Source: common practice - with no group difference a level-0.05 test rejects in about
    5 % of 400 simulated cohorts (band 0.025-0.08, about +-2.5 binomial sd)."""
    rng = np.random.default_rng(2024)
    p = [summary_test(*_cohort(rng), effect_sizes=False, **options)["p"] for _ in range(400)]
    assert 0.025 <= np.mean(np.array(p) <= 0.05) <= 0.08


def test_two_group_power_rises_with_the_difference():
    """Source: common practice - a real difference (-5 points, sd ~5) is found more often
    than under the null, and more often with more subjects."""
    rng = np.random.default_rng(99)
    rates = []
    for n in (8, 20):
        p = [summary_test(*_cohort(rng, n, diff=-5.0), effect_sizes=False)["p"] for _ in range(200)]
        rates.append(np.mean(np.array(p) <= 0.05))
    assert 0.2 < rates[0] < rates[1]
