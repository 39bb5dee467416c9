"""Tests of fstats.fit.ols (ordinary least squares, many channels at once)."""

import numpy as np
import statsmodels.api as sm
from numpy.testing import assert_allclose

from fstats.fit.ols import design_rank, ordinary_least_squares


def _data(seed=0, n=400, k=5, m=3):
    rng = np.random.default_rng(seed)
    x = np.column_stack([np.ones(n), rng.standard_normal((n, k - 1))])
    y = x @ rng.standard_normal((k, m)) + rng.standard_normal((n, m))
    return x, y


def test_ols_matches_statsmodels_per_channel():
    """Source: statsmodels.api.OLS (REFERENCE-CHECKS 2.1): params, bse, df_resid, scale."""
    x, y = _data()
    fit = ordinary_least_squares(y, x)
    for j in range(y.shape[1]):
        ref = sm.OLS(y[:, j], x).fit()
        assert_allclose(fit.betas[:, j], ref.params, rtol=1e-10)
        assert_allclose(np.sqrt(np.diag(fit.cov[j])), ref.bse, rtol=1e-10)
        assert_allclose(fit.residual_var[j], ref.scale, rtol=1e-10)
        assert fit.dof == ref.df_resid


def test_ols_inputs_unchanged():
    """Source: common practice - pure functions leave their arguments alone."""
    x, y = _data(1)
    x0, y0 = x.copy(), y.copy()
    ordinary_least_squares(y, x)
    assert_allclose(x, x0)
    assert_allclose(y, y0)


def test_design_rank_detects_collinear_and_zero_columns():
    """Source: common practice - a column equal to a sum of others (or all zero) loses rank."""
    x, _ = _data(2)
    assert design_rank(x) == x.shape[1]
    collinear = np.column_stack([x, x[:, 1] + 2 * x[:, 2]])
    assert design_rank(collinear) == x.shape[1]
    assert design_rank(np.column_stack([x, np.zeros(x.shape[0])])) == x.shape[1]
