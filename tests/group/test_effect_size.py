"""Effect sizes: fstats.group.effect_size."""

import math

import numpy as np
from numpy.testing import assert_allclose
from scipy import stats

from fstats.group.effect_size import (
    hedges_correction,
    noncentral_t_interval,
    one_sample_effect,
    two_sample_effect,
)


def test_hedges_correction_close_to_its_approximation():
    """Source: Hedges (1981) J Educ Stat 6:107-128 - exact J(df) vs 1 - 3/(4 df - 1), and
    J(10) = Γ(5) / (√5 Γ(4.5)) worked by hand: Γ(5) = 24, Γ(4.5) = 3.5·2.5·1.5·0.5·√π."""
    for df in (5, 10, 30, 100):
        assert_allclose(hedges_correction(df), 1 - 3 / (4 * df - 1), rtol=2e-3)
    by_hand = 24 / (math.sqrt(5) * 3.5 * 2.5 * 1.5 * 0.5 * math.sqrt(math.pi))
    assert_allclose(hedges_correction(10), by_hand, rtol=1e-12)


def test_noncentral_interval_inverts_the_cdf():
    """Source: Steiger & Fouladi (1997) test inversion - at the bounds the noncentral t cdf of
    the observed t equals 1 - alpha/2 and alpha/2 (checked with scipy.stats.nct)."""
    for t, df in ((2.5, 11), (-1.2, 20), (0.0, 7)):
        low, high = noncentral_t_interval(t, df)
        assert_allclose(stats.nct.cdf(t, df, low), 0.975, atol=1e-9)
        assert_allclose(stats.nct.cdf(t, df, high), 0.025, atol=1e-9)


def test_effect_size_definitions():
    """Source: Cohen (1988) d = mean/sd (one sample) and (m1-m2)/s_pooled; g = J d."""
    x = np.array([1.0, 2.0, 3.0, 4.0, 6.0])
    res = one_sample_effect(x)
    assert_allclose(res["cohens_d"], x.mean() / x.std(ddof=1))
    assert_allclose(res["hedges_g"], hedges_correction(4) * res["cohens_d"])
    a, b = np.array([3.0, 4.0, 5.0, 7.0]), np.array([1.0, 2.0, 2.5])
    sp = math.sqrt((3 * a.var(ddof=1) + 2 * b.var(ddof=1)) / 5)
    assert_allclose(two_sample_effect(a, b)["cohens_d"], (a.mean() - b.mean()) / sp)


def test_interval_coverage_by_simulation():
    """Source: common practice - a 95 % interval for delta covers the true value in about
    95 % of simulated samples (250 samples of n=10, delta=0.8; band 0.91-0.99, about
    3 binomial sd)."""
    rng = np.random.default_rng(12)
    delta, n, hits = 0.8, 10, 0
    for _ in range(250):
        x = rng.normal(delta, 1.0, size=n)
        res = one_sample_effect(x)
        j = hedges_correction(n - 1)
        hits += res["hedges_g_ci_low"] / j <= delta <= res["hedges_g_ci_high"] / j
    assert 0.91 <= hits / 250 <= 0.99
