"""Sign-flip permutation test: fstats.group.permutation."""

import itertools

import numpy as np
import pytest
from numpy.testing import assert_allclose
from scipy import stats

from fstats.group.permutation import sign_flip_test


def test_exact_enumeration_matches_brute_force():
    """Source: Nichols & Holmes (2002) Hum Brain Mapp 15:1-25 sign-flip definition, counted
    here by brute force over all 2^n sign vectors with scipy's one-sample t."""
    x = np.array([1.2, 0.4, 2.2, -0.3, 1.7, 0.9, 0.1, 1.4])
    t_obs = abs(stats.ttest_1samp(x, 0).statistic)
    count = 0
    for signs in itertools.product([1, -1], repeat=x.size):
        count += abs(stats.ttest_1samp(x * np.array(signs), 0).statistic) >= t_obs - 1e-12
    res = sign_flip_test(x, n_permutations=1000, rng=np.random.default_rng(0))
    assert res.exact and res.n_flips == 256
    assert_allclose(res.p[0], count / 256)


def test_monte_carlo_close_to_exact():
    """Source: common practice - Monte Carlo p approaches the exact p (binomial error)."""
    rng = np.random.default_rng(1)
    x = rng.normal(0.5, 1, size=12)
    exact = sign_flip_test(x, n_permutations=5000, rng=rng).p[0]
    mc = sign_flip_test(x, n_permutations=4000, rng=rng)
    assert not mc.exact
    assert abs(mc.p[0] - exact) < 4 * np.sqrt(exact * (1 - exact) / 4000) + 1e-3


def test_null_rejection_rate():
    """Source: common practice - under a symmetric null the test rejects at about alpha
    (300 null datasets, n=10, exact test; band 0.02-0.09)."""
    rng = np.random.default_rng(2)
    p = [
        sign_flip_test(rng.standard_t(3, size=10), n_permutations=1024, rng=rng).p[0]
        for _ in range(300)
    ]
    assert 0.02 <= np.mean(np.array(p) <= 0.05) <= 0.09


def test_max_statistic_is_at_least_the_single_p():
    """Source: Westfall & Young (1993) single-step max-T: adjusted p >= unadjusted p."""
    rng = np.random.default_rng(3)
    x = rng.normal(0.3, 1, size=(9, 4))
    x[2, 1] = np.nan  # a subject lacking one channel
    res = sign_flip_test(x, n_permutations=600, rng=rng, max_statistic=True)
    assert np.all(res.p_max >= res.p - 1e-12)
    assert np.all(np.isfinite(res.p))


def test_needs_two_subjects():
    """Source: common practice."""
    with pytest.raises(ValueError):
        sign_flip_test(np.array([1.0]), rng=np.random.default_rng(0))
