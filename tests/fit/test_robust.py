"""Tests of fstats.fit.robust (Tukey bisquare weights, MAD scale, IRLS)."""

import numpy as np
import statsmodels.api as sm
from numpy.testing import assert_allclose
from statsmodels.robust.norms import TukeyBiweight
from statsmodels.robust.scale import mad

from fstats.fit.robust import TUKEY_C, irls, mad_scale, tukey_bisquare_weights


def test_tukey_weights_match_statsmodels():
    """Source: statsmodels.robust.norms.TukeyBiweight(c=4.685).weights (REFERENCE-CHECKS 2.4)."""
    u = np.linspace(-7, 7, 141)
    assert_allclose(tukey_bisquare_weights(u), TukeyBiweight(c=4.685).weights(u), rtol=1e-12)


def test_tukey_weight_at_half_c():
    """Source: REFERENCE-CHECKS 2.4 - w(c/2) = (1 - 1/4)^2 = 0.5625; w = 0 beyond c."""
    assert_allclose(tukey_bisquare_weights(np.array([TUKEY_C / 2])), [0.5625])
    assert tukey_bisquare_weights(np.array([4.7, -5.0])).tolist() == [0.0, 0.0]


def test_tukey_tuning_constant_gives_95_percent_efficiency():
    """Source: statsmodels TukeyBiweight.get_tuning(eff=0.95) = 4.685065 (REFERENCE-CHECKS 2.4)."""
    assert abs(TukeyBiweight.get_tuning(eff=0.95)[0] - TUKEY_C) < 1e-3


def test_mad_scale_matches_statsmodels():
    """Source: statsmodels.robust.scale.mad(x, center=0) = median|x| / 0.6745."""
    x = np.random.default_rng(0).standard_normal(1001)
    assert_allclose(mad_scale(x), mad(x, center=0), rtol=1e-12)


def test_irls_matches_statsmodels_rlm():
    """Source: statsmodels.api.RLM(y, X, M=TukeyBiweight()).fit(scale_est='mad')."""
    rng = np.random.default_rng(1)
    n = 500
    x = np.column_stack([np.ones(n), rng.standard_normal((n, 2))])
    y = x @ [1.0, 2.0, -0.5] + rng.standard_normal(n)
    y[rng.choice(n, 25, replace=False)] += rng.choice([-15, 15], 25)  # gross outliers
    ref = sm.RLM(y, x, M=TukeyBiweight(c=4.685)).fit(conv="coefs", tol=1e-12, maxiter=500)
    ours = irls(y, x, tol=1e-12, max_iter=500)
    assert ours.converged
    assert_allclose(ours.betas, ref.params, rtol=1e-6)
    assert_allclose(ours.weights, ref.weights, atol=1e-6)
    assert_allclose(ours.scale, ref.scale, rtol=1e-6)
