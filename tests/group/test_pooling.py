"""Random-effects pooling: fstats.group.pooling."""

import numpy as np
import pytest
from numpy.testing import assert_allclose
from scipy import optimize
from statsmodels.stats.meta_analysis import combine_effects

from fstats.group.pooling import pool_random_effects, tau2_dersimonian_laird, tau2_reml

Y = np.array([0.10, 0.30, 0.35, 0.65, 0.45, 0.15])
V = np.array([0.03, 0.03, 0.05, 0.01, 0.05, 0.02])


def test_dersimonian_laird_worked_example():
    """Source: DerSimonian & Laird (1986) Control Clin Trials 7:177-188 moment formulas,
    worked example of REFERENCE-CHECKS 4.2 (tau2 0.039786, mu 0.344250, SE 0.106754, I2 0.6095)."""
    fit = pool_random_effects(Y, V, method="dersimonian-laird", knapp_hartung=False)
    assert_allclose(fit.tau2, 0.039786, atol=5e-7)
    assert_allclose(fit.coef[0], 0.344250, atol=5e-7)
    assert_allclose(np.sqrt(fit.cov[0, 0]), 0.106754, atol=5e-7)
    assert_allclose(fit.q, 12.805628, atol=5e-6)
    assert_allclose(fit.i2, 0.6095, atol=5e-5)


def test_dersimonian_laird_matches_statsmodels_combine_effects():
    """Source: statsmodels.stats.meta_analysis.combine_effects(method_re='dl')."""
    rng = np.random.default_rng(11)
    y = rng.normal(10, 4, size=15)
    v = rng.uniform(1, 9, size=15)
    ref = combine_effects(y, v, method_re="dl")
    fit = pool_random_effects(y, v, method="dersimonian-laird", knapp_hartung=False)
    assert_allclose(fit.tau2, ref.tau2, rtol=1e-12)
    assert_allclose(fit.coef[0], ref.mean_effect_re, rtol=1e-12)
    assert_allclose(np.sqrt(fit.cov[0, 0]), ref.sd_eff_w_re, rtol=1e-12)
    assert_allclose(fit.i2, ref.i2, rtol=1e-12)
    frame = ref.summary_frame()
    test = fit.test(0)
    assert_allclose(
        [test["ci_low"], test["ci_high"]],
        frame.loc["random effect", ["ci_low", "ci_upp"]].to_numpy(float),
        rtol=1e-10,
    )


def test_knapp_hartung_matches_statsmodels_hksj():
    """Source: statsmodels combine_effects, sd_eff_w_re_hksj (Hartung-Knapp-Sidik-Jonkman SE)."""
    ref = combine_effects(Y, V, method_re="dl")
    fit = pool_random_effects(Y, V, method="dersimonian-laird", knapp_hartung=True)
    assert_allclose(np.sqrt(fit.cov[0, 0]), ref.sd_eff_w_re_hksj, rtol=1e-12)
    assert fit.df == Y.size - 1


def _reml_negloglik(tau2, y, v, x):
    """Independent REML criterion in matrix form: -1/2[log|V| + log|X'V^-1 X| + r'V^-1 r]."""
    cov = np.diag(v + tau2)
    inv = np.linalg.inv(cov)
    xtvx = x.T @ inv @ x
    beta = np.linalg.solve(xtvx, x.T @ inv @ y)
    r = y - x @ beta
    return 0.5 * (np.linalg.slogdet(cov)[1] + np.linalg.slogdet(xtvx)[1] + r @ inv @ r)


@pytest.mark.parametrize("seed", [0, 1, 2])
@pytest.mark.parametrize("two_groups", [False, True])
def test_reml_maximises_the_restricted_likelihood(seed, two_groups):
    """Source: Harville (1977) JASA 72:320-338 REML criterion, maximised directly with
    scipy.optimize.minimize_scalar (independent of the Fisher scoring in fstats)."""
    rng = np.random.default_rng(seed)
    k = 14
    x = np.ones((k, 1))
    if two_groups:
        x = np.column_stack([x, np.repeat([0.0, 1.0], k // 2)])
    v = rng.uniform(0.5, 4.0, size=k)
    y = x @ np.arange(1.0, x.shape[1] + 1) + rng.normal(0, np.sqrt(v + 2.0))
    found = optimize.minimize_scalar(
        _reml_negloglik, bounds=(0, 100), args=(y, v, x), method="bounded", options={"xatol": 1e-10}
    )
    expected = found.x if found.fun < _reml_negloglik(0.0, y, v, x) else 0.0
    assert_allclose(tau2_reml(y, v, x), expected, atol=1e-6)


def test_reml_equal_variances_closed_form():
    """Source: closed form worked here - with equal v the REML estimate is max(0, s^2 - v)
    (s^2 the sample variance, ddof 1), the same as the moment estimator."""
    rng = np.random.default_rng(4)
    y = rng.normal(0, 3, size=20)
    v = np.full(20, 2.0)
    expected = max(0.0, np.var(y, ddof=1) - 2.0)
    assert_allclose(tau2_reml(y, v), expected, rtol=1e-8)
    assert_allclose(tau2_dersimonian_laird(y, v), expected, rtol=1e-12)


def test_homogeneous_data_gives_fixed_effect():
    """Source: REFERENCE-CHECKS 4.2 edge case - Q < k-1 gives tau2 = 0, so RE equals FE."""
    y = np.array([1.0, 1.01, 0.99, 1.0])
    v = np.array([0.5, 0.4, 0.6, 0.5])
    for method in ("dersimonian-laird", "reml"):
        fit = pool_random_effects(y, v, method=method, knapp_hartung=False)
        fixed = pool_random_effects(y, v, method="fixed", knapp_hartung=False)
        assert fit.tau2 == 0.0
        assert_allclose(fit.coef, fixed.coef)


def test_inputs_are_not_modified():
    """Source: common practice - pure functions leave their arguments alone."""
    y, v = Y.copy(), V.copy()
    pool_random_effects(y, v, method="reml")
    assert_allclose(y, Y)
    assert_allclose(v, V)


def test_meta_regression_matches_statsmodels_wls():
    """Source: statsmodels WLS with weights 1/(v + tau2): same coefficients; its scaled
    covariance is the Knapp-Hartung covariance (scale = weighted RSS / (k - p))."""
    import statsmodels.api as sm

    rng = np.random.default_rng(9)
    k = 16
    x = np.column_stack([np.ones(k), np.repeat([1.0, 0.0], k // 2)])
    v = rng.uniform(1, 6, size=k)
    y = x @ np.array([10.0, -4.0]) + rng.normal(0, np.sqrt(v + 3.0))
    fit = pool_random_effects(y, v, x, method="reml", knapp_hartung=True)
    ref = sm.WLS(y, x, weights=1.0 / (v + fit.tau2)).fit()
    assert_allclose(fit.coef, ref.params, rtol=1e-12)
    assert_allclose(fit.cov, ref.cov_params(), rtol=1e-10)
    assert_allclose(fit.test(1)["p"], ref.pvalues[1], rtol=1e-10)
