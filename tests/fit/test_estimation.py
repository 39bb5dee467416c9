"""Tests of fstats.fit.estimation (OLS, iterated AR prewhitening, AR-IRLS for one channel)."""

import numpy as np
import pytest
import statsmodels.api as sm
from numpy.testing import assert_allclose
from statsmodels.regression.linear_model import GLSAR

from fstats.fit.autoregressive import whiten
from fstats.fit.estimation import ChannelFitError, estimate_channel
from fstats.fit.robust import irls


def _series(seed, n=3000, coefs=(0.5, 0.2)):
    rng = np.random.default_rng(seed)
    x = np.column_stack([np.ones(n), rng.standard_normal((n, 3))])
    e = np.zeros(n)
    w = rng.standard_normal(n)
    for t in range(len(coefs), n):
        e[t] = sum(c * e[t - i - 1] for i, c in enumerate(coefs)) + w[t]
    return x, x @ [1.0, 2.0, 0.5, -1.0] + e


def test_ols_mode_matches_statsmodels_ols():
    """Source: statsmodels.api.OLS (REFERENCE-CHECKS 2.1), rtol 1e-8 on params and bse."""
    x, y = _series(0)
    ours = estimate_channel(y, x, method="ols")
    ref = sm.OLS(y, x).fit()
    assert_allclose(ours.betas, ref.params, rtol=1e-8)
    assert_allclose(np.sqrt(np.diag(ours.cov)), ref.bse, rtol=1e-8)
    assert ours.dof == ref.df_resid


@pytest.mark.parametrize("order", [1, 2, 5])
def test_fixed_order_ar_matches_glsar_iterative_fit(order):
    """Source: statsmodels GLSAR(y, X, rho=p).iterative_fit (REFERENCE-CHECKS 2.2).

    GLSAR drops the first p rows after whitening and estimates rho by yule_walker with
    its default 'adjusted' normalisation; estimate_channel does the same with
    ar_estimator='adjusted' and the model-based covariance, so estimates, standard
    errors and residual df agree once both iterations have converged.
    """
    x, y = _series(order)
    ref = GLSAR(y, x, rho=order).iterative_fit(maxiter=200, rtol=1e-12)
    ours = estimate_channel(
        y,
        x,
        method="ar",
        ar_order=order,
        ar_estimator="adjusted",
        covariance="model",
        tol=1e-13,
        max_iter=200,
    )
    assert_allclose(ours.betas, ref.params, rtol=1e-8)
    assert_allclose(np.sqrt(np.diag(ours.cov)), ref.bse, rtol=1e-6)
    assert_allclose(ours.ar_coefs, ref.model.rho, rtol=1e-6)
    assert ours.dof == ref.df_resid


def test_ar_irls_resists_motion_spikes():
    """Source: Barker, Aarabi & Huppert 2013 (Biomed Opt Express 4:1366) - robust weighting
    limits the influence of motion spikes that plain AR prewhitening passes through."""
    x, y = _series(7)
    clean = estimate_channel(y, x, method="ar", max_ar_order=10).betas
    spiky = y.copy()
    rng = np.random.default_rng(8)
    for start in rng.choice(2900, 12, replace=False):
        spiky[start : start + 5] += 40.0 * x[start : start + 5, 1]  # spikes aligned with X
    err_ar = np.abs(estimate_channel(spiky, x, method="ar", max_ar_order=10).betas - clean)
    robust = estimate_channel(spiky, x, method="ar-irls", max_ar_order=10)
    err_irls = np.abs(robust.betas - clean)
    assert err_irls[1] < 0.2 * err_ar[1]
    assert np.nanmin(robust.weights) == 0.0


def test_missing_samples_are_excluded():
    """Source: common practice - NaN rows are dropped; the fit of the rest is unchanged."""
    x, y = _series(9)
    y_nan = y.copy()
    y_nan[100:150] = np.nan
    ours = estimate_channel(y_nan, x, method="ols")
    ref = sm.OLS(y[np.isfinite(y_nan)], x[np.isfinite(y_nan)]).fit()
    assert_allclose(ours.betas, ref.params, rtol=1e-8)
    assert np.isnan(ours.fitted[100:150]).all() and np.isnan(ours.residuals[120])
    ar = estimate_channel(y_nan, x, method="ar-irls", max_ar_order=5)
    assert ar.n_used <= np.isfinite(y_nan).sum() - 2 * ar.ar_coefs.size


def test_t_invariant_to_flow_scaling():
    """Source: common practice - t values do not depend on the flow's unit."""
    x, y = _series(10)
    a = estimate_channel(y, x, max_ar_order=10)
    b = estimate_channel(y * 1e-8, x, max_ar_order=10)
    assert_allclose(a.betas * 1e-8, b.betas, rtol=1e-6)
    assert_allclose(a.betas / np.sqrt(np.diag(a.cov)), b.betas / np.sqrt(np.diag(b.cov)), rtol=1e-6)


@pytest.mark.parametrize(
    ("flow", "columns", "match"),
    [
        (np.full(200, np.nan), 3, "no valid samples"),
        (np.full(200, 2.0e-8), 3, "constant flow"),
        (np.random.default_rng(0).standard_normal(200), 250, "valid samples for 250"),
    ],
)
def test_degenerate_channels_raise_one_line_reason(flow, columns, match):
    """Source: common practice - a degenerate channel is reported, not fitted."""
    x = np.random.default_rng(1).standard_normal((200, columns))
    with pytest.raises(ChannelFitError, match=match):
        estimate_channel(flow, x)


def test_singular_design_is_refused():
    """Source: common practice - a rank-deficient design has no unique estimate."""
    rng = np.random.default_rng(2)
    x = rng.standard_normal((300, 3))
    x = np.column_stack([x, x[:, 0] - x[:, 1]])
    with pytest.raises(ChannelFitError, match="rank deficient"):
        estimate_channel(rng.standard_normal(300), x)


def test_ar_with_gaps_is_ols_on_the_whitened_kept_rows():
    """Source: numpy.linalg.lstsq on the Cochrane-Orcutt rows (common practice) - at
    convergence the AR fit with missing samples is OLS of the whitened flow on the whitened
    design over the rows whose p predecessors exist; the Gram-matrix shortcut reproduces it,
    estimate and model covariance, to 1e-10."""
    x, y = _series(11)
    y = y.copy()
    y[[0, 700, 701, 702, 1500, 2999]] = np.nan
    ours = estimate_channel(
        y, x, method="ar", ar_order=3, covariance="model", tol=1e-13, max_iter=200
    )
    valid = np.isfinite(y)
    yw = whiten(np.where(valid, y, 0.0), ours.ar_coefs, valid)
    xw = whiten(np.where(valid[:, None], x, 0.0), ours.ar_coefs, valid)
    ref, *_ = np.linalg.lstsq(xw, yw, rcond=None)
    assert_allclose(ours.betas, ref, rtol=1e-10)
    resid = yw - xw @ ref
    cov = np.linalg.inv(xw.T @ xw) * (resid @ resid) / (yw.size - x.shape[1])
    assert_allclose(ours.cov, cov, rtol=1e-8)
    assert_allclose(ours.whitened_residuals[np.isfinite(ours.whitened_residuals)], resid, atol=1e-9)


def test_ar_irls_reaches_the_bisquare_fixed_point():
    """Source: statsmodels RLM-equivalent IRLS (fstats.fit.robust.irls, checked against RLM)
    - at convergence the AR-IRLS estimate is the Tukey-bisquare M-estimate of the whitened
    regression: restarting full IRLS from it on the same whitened rows leaves it in place."""
    x, y = _series(12)
    y = y.copy()
    y[np.random.default_rng(13).choice(3000, 30, replace=False)] += 25.0
    ours = estimate_channel(y, x, max_ar_order=6, covariance="model", tol=1e-12, max_iter=60)
    assert ours.converged
    valid = np.ones(y.size, bool)
    yw = whiten(y, ours.ar_coefs, valid)
    xw = whiten(x, ours.ar_coefs, valid)
    ref = irls(yw, xw, betas=ours.betas, tol=1e-13, max_iter=200)
    assert_allclose(ours.betas, ref.betas, rtol=1e-8)
    assert_allclose(ours.weights[np.isfinite(ours.weights)], ref.weights, atol=1e-8)


def test_ar_irls_without_gaps_equals_the_whitened_rows_path():
    """Source: fstats.fit.robust.irls (checked against statsmodels RLM) on rows whitened
    with scipy.signal.lfilter - the gap-free fit, which never forms the whitened design
    during its rounds, ends at the bisquare M-estimate of the final whitened regression,
    with the covariance computed from those rows."""
    from scipy.signal import lfilter

    x, y = _series(14)
    y = y.copy()
    y[np.random.default_rng(15).choice(3000, 20, replace=False)] -= 20.0
    ours = estimate_channel(y, x, max_ar_order=8, covariance="model", tol=1e-12, max_iter=60)
    assert ours.converged
    p = ours.ar_coefs.size
    taps = np.concatenate([[1.0], -ours.ar_coefs])
    yw = lfilter(taps, [1.0], y)[p:]
    xw = lfilter(taps, [1.0], x, axis=0)[p:]
    ref = irls(yw, xw, betas=ours.betas, tol=1e-13, max_iter=200)
    assert_allclose(ours.betas, ref.betas, rtol=1e-8)
    w = ref.weights
    resid = yw - xw @ ref.betas
    cov = np.linalg.inv(xw.T @ (w[:, None] * xw)) * np.sum(w * resid**2) / (w.sum() - x.shape[1])
    assert_allclose(ours.cov, cov, rtol=1e-6)


def test_ar_irls_with_order_zero_is_the_plain_bisquare_fit():
    """Source: fstats.fit.robust.irls (checked against statsmodels RLM) - with the AR order
    fixed to 0 nothing is whitened, and the gap-free AR-IRLS fit is the bisquare M-estimate
    of the raw regression (a filter with one tap must not trip the filtered-design path)."""
    x, y = _series(16, coefs=())
    y = y.copy()
    y[np.random.default_rng(17).choice(3000, 15, replace=False)] += 30.0
    ours = estimate_channel(y, x, ar_order=0, covariance="model", tol=1e-12, max_iter=60)
    assert ours.ar_coefs.size == 0
    ref = irls(y, x, betas=ours.betas, tol=1e-13, max_iter=200)
    assert_allclose(ours.betas, ref.betas, rtol=1e-8)
