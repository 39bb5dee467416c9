"""Tests of fstats.fit.inference (t and F tests of contrasts)."""

import numpy as np
import statsmodels.api as sm
from numpy.testing import assert_allclose

from fstats.fit.inference import f_test, t_test


def _ols(seed=0):
    rng = np.random.default_rng(seed)
    x = np.column_stack([np.ones(120), rng.standard_normal((120, 3))])
    y = x @ [0.5, 0.3, -0.2, 0.0] + rng.standard_normal(120)
    return sm.OLS(y, x).fit()


def test_t_contrast_matches_statsmodels():
    """Source: statsmodels RegressionResults.t_test (estimate, se, t, p, 95 % CI)."""
    ref = _ols()
    c = np.array([0.0, 1.0, -1.0, 0.0])
    ours = t_test(ref.params, ref.cov_params(), c, ref.df_resid)
    tt = ref.t_test(c)
    assert_allclose(ours.estimate, tt.effect[0], rtol=1e-10)
    assert_allclose(ours.se, tt.sd[0, 0], rtol=1e-10)
    assert_allclose(ours.stat, tt.tvalue[0, 0], rtol=1e-10)
    assert_allclose(ours.p, tt.pvalue, rtol=1e-8)
    assert_allclose([ours.ci_low, ours.ci_high], tt.conf_int(alpha=0.05)[0], rtol=1e-10)


def test_f_test_matches_statsmodels():
    """Source: statsmodels RegressionResults.f_test (F, df, p)."""
    ref = _ols(1)
    c = np.array([[0.0, 1.0, 0.0, 0.0], [0.0, 0.0, 1.0, 0.0]])
    ours = f_test(ref.params, ref.cov_params(), c, ref.df_resid)
    ft = ref.f_test(c)
    assert_allclose(ours.stat, float(np.squeeze(ft.fvalue)), rtol=1e-10)
    assert_allclose(ours.p, float(ft.pvalue), rtol=1e-8)
    assert ours.df_num == 2 and np.isnan(ours.estimate)
