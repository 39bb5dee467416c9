"""Tests of fstats.fit.autoregressive (autocovariance, Levinson-Durbin, BIC, whitening)."""

import numpy as np
import pytest
from numpy.testing import assert_allclose
from scipy.linalg import solve_toeplitz
from statsmodels.regression.linear_model import GLSAR, yule_walker
from statsmodels.tsa.stattools import acovf

from fstats.fit.autoregressive import (
    autocovariance,
    default_max_ar_order,
    fit_ar,
    levinson_durbin,
    whiten,
    whitened_rows,
)


def _ar_series(coefs, n, seed):
    rng = np.random.default_rng(seed)
    e = rng.standard_normal(n + 200)
    x = np.zeros_like(e)
    for t in range(len(coefs), e.size):
        x[t] = np.dot(coefs, x[t - len(coefs) : t][::-1]) + e[t]
    return x[200:]


def test_autocovariance_matches_statsmodels_acovf():
    """Source: statsmodels.tsa.stattools.acovf (adjusted=False and adjusted=True)."""
    x = _ar_series([0.6], 500, 0)
    assert_allclose(autocovariance(x, 10), acovf(x, adjusted=False, nlag=10), rtol=1e-10)
    assert_allclose(
        autocovariance(x, 10, method="adjusted"), acovf(x, adjusted=True, nlag=10), rtol=1e-10
    )


def test_autocovariance_with_gaps_matches_missing_conservative():
    """Source: statsmodels acovf(missing='conservative') counts only pairs present (adjusted)."""
    x = _ar_series([0.5], 400, 1)
    x[[10, 11, 50, 200]] = np.nan
    ref = acovf(x, adjusted=True, missing="conservative", nlag=5)
    assert_allclose(autocovariance(x, 5, method="adjusted"), ref, rtol=1e-10)


@pytest.mark.parametrize("method", ["mle", "adjusted"])
def test_levinson_matches_yule_walker(method):
    """Source: statsmodels.regression.linear_model.yule_walker (same normalisation)."""
    x = _ar_series([0.5, 0.2], 2000, 2)
    coefs, var = levinson_durbin(autocovariance(x, 6, method=method), 6)
    for p in (1, 2, 6):
        rho, sigma = yule_walker(x, order=p, method=method, result_object=False)
        assert_allclose(coefs[p], rho, rtol=1e-10)
        assert_allclose(var[p], sigma**2, rtol=1e-10)


def test_levinson_matches_toeplitz_solve():
    """Source: scipy.linalg.solve_toeplitz on the Yule-Walker equations R a = r."""
    r = autocovariance(_ar_series([0.9, -0.3, 0.1], 3000, 3), 12)
    coefs, _ = levinson_durbin(r, 12)
    assert_allclose(coefs[12], solve_toeplitz(r[:12], r[1:13]), rtol=1e-9)


def test_bic_recovers_true_order():
    """Source: Schwarz (1978) BIC is consistent for the order of a finite AR process."""
    x = _ar_series([0.5, 0.3], 20000, 4)
    model = fit_ar(x, 15)
    assert model.order == 2
    assert_allclose(model.coefs, [0.5, 0.3], atol=0.03)


def test_whiten_matches_glsar_whiten():
    """Source: statsmodels GLSAR.whiten (drops the first p rows; REFERENCE-CHECKS 2.2)."""
    rng = np.random.default_rng(5)
    x = rng.standard_normal((300, 3))
    rho = np.array([0.5, 0.2, -0.1])
    ref = GLSAR(x[:, 0], x, rho=rho).whiten(x)
    assert_allclose(whiten(x, rho, np.ones(300, bool)), ref, rtol=1e-12)
    long_rho = np.linspace(0.2, 0.01, 40)  # the FFT path for long filters
    ref = GLSAR(x[:, 0], x, rho=long_rho).whiten(x)
    assert_allclose(whiten(x, long_rho, np.ones(300, bool)), ref, rtol=1e-9, atol=1e-12)


def test_whitened_rows_drop_p_after_each_gap():
    """Source: common practice (Cochrane-Orcutt) - row t needs rows t-p..t present."""
    valid = np.ones(20, bool)
    valid[8] = False
    kept = whitened_rows(valid, 2)
    assert not kept[:2].any() and kept[2:8].all()
    assert not kept[8:11].any() and kept[11:].all()


def test_default_max_order_is_four_seconds():
    """Source: recalled from memory - AR-IRLS practice uses about 4 x sampling rate."""
    assert default_max_ar_order(20.0) == 80
    assert default_max_ar_order(10.0) == 40
