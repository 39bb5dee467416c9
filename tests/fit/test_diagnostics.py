"""Tests of fstats.fit.diagnostics (acf, Durbin-Watson, Ljung-Box, R², variance share)."""

import numpy as np
from numpy.testing import assert_allclose
from statsmodels.stats.diagnostic import acorr_ljungbox
from statsmodels.stats.stattools import durbin_watson as sm_durbin_watson
from statsmodels.tsa.stattools import acf as sm_acf

from fstats.fit.diagnostics import acf, durbin_watson, ljung_box, r_squared, variance_share


def _ar1(seed, n=800, rho=0.6):
    rng = np.random.default_rng(seed)
    e = rng.standard_normal(n)
    x = np.zeros(n)
    for t in range(1, n):
        x[t] = rho * x[t - 1] + e[t]
    return x


def test_acf_matches_statsmodels():
    """Source: statsmodels.tsa.stattools.acf (biased autocovariance, demeaned)."""
    x = _ar1(0)
    assert_allclose(acf(x, 20), sm_acf(x, nlags=20, fft=False), rtol=1e-10)


def test_durbin_watson_matches_statsmodels():
    """Source: statsmodels.stats.stattools.durbin_watson; about 2(1 - rho) for AR(1)."""
    x = _ar1(1)
    assert_allclose(durbin_watson(x), sm_durbin_watson(x), rtol=1e-12)
    assert abs(durbin_watson(x) - 2 * (1 - 0.6)) < 0.15


def test_ljung_box_matches_statsmodels():
    """Source: statsmodels.stats.diagnostic.acorr_ljungbox (Q statistic and p-value)."""
    x = _ar1(2, rho=0.1)
    ref = acorr_ljungbox(x, lags=[10])
    q, p = ljung_box(x, 10)
    assert_allclose(q, ref["lb_stat"].iloc[0], rtol=1e-10)
    assert_allclose(p, ref["lb_pvalue"].iloc[0], rtol=1e-8)


def test_r_squared_and_share_closed_form():
    """Source: closed form - y = a + b with independent parts: R² of a and var share of a."""
    rng = np.random.default_rng(3)
    a = rng.standard_normal(5000)
    y = a + rng.standard_normal(5000)
    assert abs(r_squared(y, a) - 0.5) < 0.05
    assert abs(variance_share(y, a) - 0.5) < 0.05
    assert r_squared(y, y) == 1.0
