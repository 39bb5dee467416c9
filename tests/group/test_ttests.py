"""Unweighted t tests: fstats.group.ttests."""

import numpy as np
import pytest
from numpy.testing import assert_allclose
from scipy import stats

from fstats.group.ttests import one_sample_t, two_sample_t


def test_one_sample_reference_values():
    """Source: REFERENCE-CHECKS 4.1 - [1,2,3,4,6] vs 0 gives t=3.719924, p=0.020476, df=4."""
    res = one_sample_t(np.array([1.0, 2.0, 3.0, 4.0, 6.0]))
    assert_allclose([res["stat"], res["p"], res["df"]], [3.719924, 0.020476, 4], atol=1e-6)


def test_one_sample_matches_scipy_ttest_1samp():
    """Source: scipy.stats.ttest_1samp (statistic, p, df and confidence interval)."""
    x = np.random.default_rng(2).normal(1.0, 2.0, size=17)
    ref = stats.ttest_1samp(x, 0.0)
    res = one_sample_t(x, alpha=0.1)
    assert_allclose(
        [res["stat"], res["p"], res["df"]], [ref.statistic, ref.pvalue, ref.df], rtol=1e-12
    )
    ci = ref.confidence_interval(0.9)
    assert_allclose([res["ci_low"], res["ci_high"]], [ci.low, ci.high], rtol=1e-12)


@pytest.mark.parametrize("equal_variance", [False, True])
def test_two_sample_matches_scipy_ttest_ind(equal_variance):
    """Source: scipy.stats.ttest_ind, equal_var=False (Welch) and True (pooled)."""
    rng = np.random.default_rng(8)
    a, b = rng.normal(2, 1, size=9), rng.normal(0, 3, size=14)
    ref = stats.ttest_ind(a, b, equal_var=equal_variance)
    res = two_sample_t(a, b, equal_variance=equal_variance)
    assert_allclose(
        [res["stat"], res["p"], res["df"]], [ref.statistic, ref.pvalue, ref.df], rtol=1e-12
    )
    ci = ref.confidence_interval(0.95)
    assert_allclose([res["ci_low"], res["ci_high"]], [ci.low, ci.high], rtol=1e-10)


def test_one_value_is_refused():
    """Source: common practice - a variance needs two values."""
    with pytest.raises(ValueError, match="at least 2"):
        one_sample_t(np.array([1.0]))
