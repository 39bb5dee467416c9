"""Tests of fstats.fit.robust (Tukey bisquare weights, MAD scale, IRLS) and fstats.fit.rows_irls."""

import numpy as np
import pytest
import statsmodels.api as sm
from numpy.testing import assert_allclose
from statsmodels.robust.norms import TukeyBiweight
from statsmodels.robust.scale import mad

from fstats.fit.robust import (
    MAD_NORMAL,
    TUKEY_C,
    NormalEquations,
    irls,
    mad_scale,
    tukey_bisquare_weights,
    weighted_least_squares,
)
from fstats.fit.rows_irls import RowsOperator, _mad_near, irls_rows


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


def _weighted_problem(seed, n=400, k=5):
    rng = np.random.default_rng(seed)
    x = np.column_stack([np.ones(n), rng.standard_normal((n, k - 1))])
    y = x @ rng.standard_normal(k) + rng.standard_normal(n)
    return x, y, rng.uniform(0.1, 1.0, n)


def test_normal_equations_cholesky_matches_lstsq():
    """Source: numpy.linalg.lstsq on sqrt(W) X, sqrt(W) y (the weighted least-squares problem);
    the Cholesky path of the normal equations agrees to 1e-10."""
    x, y, w = _weighted_problem(2)
    root = np.sqrt(w)
    rows = (x * root[:, None]).T
    normal = NormalEquations(rows @ rows.T, rows)
    assert normal.cholesky
    ref = np.linalg.lstsq(x * root[:, None], y * root, rcond=None)[0]
    assert_allclose(normal.solve(rows @ (root * y)), ref, rtol=1e-10)
    assert_allclose(normal.inverse(), np.linalg.inv(rows @ rows.T), rtol=1e-10)
    betas, inv = weighted_least_squares(y, x, w)
    assert_allclose(betas, ref, rtol=1e-10)
    assert_allclose(inv, np.linalg.inv(rows @ rows.T), rtol=1e-10)


def test_normal_equations_fall_back_on_ill_conditioned_design():
    """Source: numpy.linalg.lstsq (SVD) and the exact solution - with cond(X) ~ 1e6 the Gram
    matrix has cond ~ 1e12, beyond MAX_GRAM_CONDITION, so the solve switches to the SVD of
    the rows and recovers an exactly representable response to 1e-8 (Cholesky of X'WX
    would lose about cond(X)^2 * eps, 1e-3 here); a singular Gram matrix without rows is refused."""
    x, _, w = _weighted_problem(3)
    wiggle = np.random.default_rng(4).standard_normal(x.shape[0])
    x = np.column_stack([x, x[:, 1] + 1e-6 * wiggle])
    truth = np.array([1.0, -2.0, 0.5, 3.0, -1.0, 2.0])
    y = x @ truth
    root = np.sqrt(w)
    rows = (x * root[:, None]).T
    normal = NormalEquations(rows @ rows.T, rows)
    assert not normal.cholesky
    betas, _ = weighted_least_squares(y, x, w)
    assert_allclose(betas, truth, rtol=1e-8)
    ref = np.linalg.lstsq(x * root[:, None], y * root, rcond=None)[0]
    assert_allclose(betas, ref, rtol=1e-8)
    with pytest.raises(np.linalg.LinAlgError):
        NormalEquations(np.ones((2, 2)))


def test_irls_rows_matches_statsmodels_rlm():
    """Source: statsmodels.api.RLM(y, X, M=TukeyBiweight()).fit(scale_est='mad'): the
    rows-layout IRLS (one factored X'WX, refreshed only when steps stop shrinking) reaches
    the same M-estimate, weights and scale."""
    rng = np.random.default_rng(1)
    n = 500
    x = np.column_stack([np.ones(n), rng.standard_normal((n, 2))])
    y = x @ [1.0, 2.0, -0.5] + rng.standard_normal(n)
    y[rng.choice(n, 25, replace=False)] += rng.choice([-15, 15], 25)
    ref = sm.RLM(y, x, M=TukeyBiweight(c=4.685)).fit(conv="coefs", tol=1e-12, maxiter=500)
    start = np.linalg.lstsq(x, y, rcond=None)[0]
    ours = irls_rows(y, np.ascontiguousarray(x.T), start, tol=1e-12, max_iter=500)
    assert ours.converged
    assert_allclose(ours.betas, ref.params, rtol=1e-6)
    assert_allclose(ours.weights, ref.weights, atol=1e-6)
    assert_allclose(ours.scale, ref.scale, rtol=1e-6)


@pytest.mark.parametrize("n", [1, 2, 7, 1000, 1001])
def test_windowed_mad_equals_full_mad(n):
    """Source: numpy.median(|r|) / 0.6745 - the windowed MAD is exact for odd and even n,
    whether the guessed scale is close (window used) or far off (full partition)."""
    rng = np.random.default_rng(n)
    r = rng.standard_normal(n) * 3.0
    full = np.median(np.abs(r)) / MAD_NORMAL
    assert mad_scale(r) == full
    for factor in (0.97, 1.0, 1.03, 0.5, 2.0):
        assert _mad_near(r, factor * full) == full


def test_irls_rows_with_a_foreign_factor_matches_statsmodels_rlm():
    """Source: statsmodels.api.RLM(y, X, M=TukeyBiweight()).fit(scale_est='mad') - taking
    every step with the unweighted X'X (scaled by 3, as from another problem) and the
    exact line search, the rows IRLS still reaches the same M-estimate; through the
    operator interface (RowsOperator) the result is the same as with the plain rows."""
    rng = np.random.default_rng(3)
    n = 800
    x = np.column_stack([np.ones(n), rng.standard_normal((n, 3))])
    y = x @ [0.5, -1.0, 2.0, 0.3] + rng.standard_normal(n)
    y[rng.choice(n, 40, replace=False)] += rng.choice([-12, 12], 40)
    ref = sm.RLM(y, x, M=TukeyBiweight(c=4.685)).fit(conv="coefs", tol=1e-12, maxiter=500)
    start = np.linalg.lstsq(x, y, rcond=None)[0]
    rows = np.ascontiguousarray(x.T)
    foreign = NormalEquations(3.0 * rows @ rows.T)
    ours = irls_rows(y, RowsOperator(rows), start, tol=1e-12, max_iter=500, normal=foreign)
    assert ours.converged
    assert_allclose(ours.betas, ref.params, rtol=1e-6)
    assert_allclose(ours.weights, ref.weights, atol=1e-6)
    plain = irls_rows(y, rows, start, tol=1e-12, max_iter=500)
    viaop = irls_rows(y, RowsOperator(rows), start, tol=1e-12, max_iter=500)
    assert_allclose(viaop.betas, plain.betas, rtol=1e-13)


def test_irls_rows_through_the_filtered_operator_matches_statsmodels_rlm():
    """Source: statsmodels.api.RLM(ỹ, X̃, M=TukeyBiweight()).fit(scale_est='mad') on rows
    whitened with scipy.signal.lfilter - with no factor given, the filtered-design operator
    takes its first steps with the single-precision preconditioner (and the line search),
    and the IRLS still ends at the double-precision M-estimate, weights and scale."""
    from scipy.signal import lfilter

    from fstats.fit.filtering import FilteredRows

    rng = np.random.default_rng(5)
    n, p = 3000, 15
    x = np.column_stack([np.ones(n), np.linspace(-1, 1, n), rng.standard_normal((n, 2))])
    coefs = rng.uniform(-0.1, 0.1, p)
    taps = np.concatenate([[1.0], -coefs])
    y = x @ [1.0, 0.5, 2.0, -0.5] + rng.standard_normal(n)
    y[rng.choice(n, 60, replace=False)] += rng.choice([-15, 15], 60)
    yw, xw = lfilter(taps, [1.0], y)[p:], lfilter(taps, [1.0], x, axis=0)[p:]
    ref = sm.RLM(yw, xw, M=TukeyBiweight(c=4.685)).fit(conv="coefs", tol=1e-12, maxiter=500)
    start = np.linalg.lstsq(xw, yw, rcond=None)[0]
    op = FilteredRows(x, coefs)
    ours = irls_rows(None, op, start, tol=1e-12, max_iter=500, residuals=yw - xw @ start)
    assert ours.converged
    assert_allclose(ours.betas, ref.params, rtol=1e-6)
    assert_allclose(ours.weights, ref.weights, atol=1e-6)
    assert_allclose(ours.scale, ref.scale, rtol=1e-6)


def test_anderson_mixed_irls_rows_reaches_the_rlm_estimate_in_fewer_steps():
    """Source: statsmodels.api.RLM(y, X, M=TukeyBiweight()).fit(scale_est='mad') - with a
    foreign factor (unweighted X'X scaled by 3) the steps converge only linearly; mixing
    each step with the previous one (Anderson acceleration, depth one; Walker & Ni 2011)
    ends at the same M-estimate with fewer steps than the plain line-searched steps."""
    rng = np.random.default_rng(4)
    n = 2000
    x = np.column_stack([np.ones(n), rng.standard_normal((n, 4))])
    y = x @ [0.5, -1.0, 2.0, 0.3, 1.0] + rng.standard_normal(n)
    y[rng.choice(n, 150, replace=False)] += rng.choice([-8, 8], 150)
    ref = sm.RLM(y, x, M=TukeyBiweight(c=4.685)).fit(conv="coefs", tol=1e-12, maxiter=500)
    start = np.linalg.lstsq(x, y, rcond=None)[0]
    rows = np.ascontiguousarray(x.T)
    foreign = NormalEquations(3.0 * rows @ rows.T)
    fits = {
        mixed: irls_rows(y, rows, start, tol=1e-10, max_iter=500, normal=foreign, accelerate=mixed)
        for mixed in (False, True)
    }
    for fit in fits.values():
        assert fit.converged
        assert_allclose(fit.betas, ref.params, rtol=1e-7)
        assert_allclose(fit.weights, ref.weights, atol=1e-7)
    assert fits[True].n_iter < fits[False].n_iter
