"""Tests of fstats/flow/solver.py: decay products and the batched iteration's building blocks."""

import numpy as np
import pytest
from numpy.testing import assert_allclose

from fstats.flow.forward import _geometry, g1_semi_infinite
from fstats.flow.solver import (
    _TAYLOR_MAX,
    _evaluate,
    _exact_trial,
    _g1_squared,
    _lm,
    _log_model,
    _model_trial,
    _ModelTable,
    _taylor_trial,
    _Workspace,
    decay_product_cm2,
)


@pytest.mark.parametrize("rho_cm, tau_e_us", [(1.0, 84.5), (2.5, 24.9), (3.0, 19.8)])
def test_decay_product_reproduces_one_over_e_times(rho_cm, tau_e_us):
    """Source: REFERENCE-CHECKS 5.1 [computed] - 1/e decay times of g1 at BFi 1e-8 cm2/s
    (Reff 0.493); the BFi*tau product at g1 = 1/e is 1e-8 cm2/s times that time."""
    geom = _geometry(rho_cm, 0.1, 10.0, 1.4, 785.0, 0.493)
    x = decay_product_cm2(np.exp(-1.0), geom, "fluence")
    assert x / 1e-8 * 1e6 == pytest.approx(tau_e_us, abs=0.06)


def test_model_derivative_matches_finite_differences():
    """Source: common practice - the analytic d(g1^2)/d(log BFi) equals a central difference
    of the forward model (fstats.flow.forward.g1_semi_infinite)."""
    lags = np.geomspace(1e-7, 1e-2, 80)
    for observable in ("fluence", "flux"):
        geom = _geometry(np.array([1.0, 3.0]), 0.1, 10.0, 1.4, 785.0, None)
        geom = {k: np.broadcast_to(v, (2,))[:, None].copy() for k, v in geom.items()}
        u = np.log(np.array([[1e-8], [2.5e-8]]))
        g1sq, slope = _g1_squared(u, lags, geom, observable)
        reference = g1_semi_infinite(
            lags, np.exp(u[:, 0]), separation_cm=np.array([1.0, 3.0]), observable=observable
        )
        assert_allclose(g1sq, reference**2, rtol=1e-12, atol=1e-300)
        h = 1e-6
        up = g1_semi_infinite(lags, np.exp(u[:, 0] + h), separation_cm=np.array([1.0, 3.0]),
                              observable=observable) ** 2  # fmt: skip
        down = g1_semi_infinite(lags, np.exp(u[:, 0] - h), separation_cm=np.array([1.0, 3.0]),
                                observable=observable) ** 2  # fmt: skip
        assert_allclose(slope, (up - down) / (2 * h), rtol=1e-6, atol=1e-12)


def test_profiled_beta_is_the_linear_least_squares_value():
    """Source: numpy.linalg.lstsq - for fixed BFi, beta minimising sum w^2 (g2 - 1 - beta g1^2)^2
    is the one-column least-squares solution (variable projection)."""
    rng = np.random.default_rng(0)
    lags = np.geomspace(1e-6, 1e-2, 60)
    geom = _geometry(2.5, 0.1, 10.0, 1.4, 785.0, None)
    geom = {k: np.broadcast_to(v, (1,))[:, None].copy() for k, v in geom.items()}
    u = np.array([np.log(1.3e-8)])
    g1sq, _ = _g1_squared(u[:, None], lags, geom, "fluence")
    w = rng.uniform(0.5, 2.0, (1, lags.size))
    y = 1 + 0.47 * g1sq + 0.01 * rng.standard_normal((1, lags.size))
    beta, resid, chi, _ = _evaluate(u, None, w * (y - 1), w, lags, geom, "fluence")
    expected = np.linalg.lstsq((w * g1sq).T, (w * (y - 1)).T, rcond=None)[0][0, 0]
    assert beta[0] == pytest.approx(expected, rel=1e-12)
    assert chi[0] == pytest.approx(np.sum(resid**2), rel=1e-12)


def _one_geometry(rho_cm, n_rows):
    geom = _geometry(rho_cm, 0.1, 10.0, 1.4, 785.0, None)
    return {k: np.broadcast_to(v, (n_rows,))[:, None].copy() for k, v in geom.items()}


@pytest.mark.parametrize("observable", ["fluence", "flux"])
def test_log_model_slopes_match_finite_differences(observable):
    """Source: common practice - L' and L'' of the solver are the first and second central
    differences of log g1^2 from the forward model (fstats.flow.forward.g1_semi_infinite)."""
    lags = np.geomspace(1e-7, 3e-3, 60)
    rho = np.array([1.0, 3.0])
    u = np.log(np.array([0.8e-8, 2.2e-8]))
    g1sq, dlog, lpp = _log_model(u[:, None], lags, _one_geometry_pair(rho), observable, True)

    def log_g1sq(shift):
        g1 = g1_semi_infinite(lags, np.exp(u + shift), separation_cm=rho, observable=observable)
        return 2.0 * np.log(g1)

    h = 1e-4
    assert_allclose(g1sq, np.exp(log_g1sq(0.0)), rtol=1e-12)
    assert_allclose(dlog, (log_g1sq(h) - log_g1sq(-h)) / (2 * h), rtol=1e-7, atol=1e-9)
    second = (log_g1sq(h) - 2 * log_g1sq(0.0) + log_g1sq(-h)) / h**2
    assert_allclose(lpp, second, rtol=1e-4, atol=1e-5)


def _one_geometry_pair(rho):
    geom = _geometry(rho, 0.1, 10.0, 1.4, 785.0, None)
    return {k: np.broadcast_to(v, rho.shape)[:, None].copy() for k, v in geom.items()}


def _noisy_rows(rng, n_rows, lags, rho_cm):
    geom = _one_geometry(rho_cm, n_rows)
    u = np.log(rng.uniform(0.7e-8, 1.5e-8, n_rows))
    g1sq, _ = _g1_squared(u[:, None], lags, geom, "fluence")
    w = 1.0 / rng.uniform(2e-3, 2e-2, (n_rows, lags.size))
    y = 1.0 + 0.5 * g1sq + rng.standard_normal(g1sq.shape) / w
    return geom, u, w, w * (y - 1.0)


def test_taylor_step_matches_an_exact_evaluation():
    """Source: common practice - a Taylor expansion of log g1^2 about u (second order), for
    steps up to the solver's limit, reproduces beta and chi^2 of an exact evaluation at the
    new point (the model written out by fstats.flow.forward)."""
    rng = np.random.default_rng(3)
    lags = np.geomspace(1e-6, 3e-3, 70)
    geom, u, w, wy = _noisy_rows(rng, 40, lags, 2.5)
    b, r, chi, power, jb, jd, dlog, lpp = _exact_trial(u, None, wy, w, lags, geom, "fluence",
                                                       None, "", "")  # fmt: skip
    du = rng.uniform(-_TAYLOR_MAX, _TAYLOR_MAX, u.size)
    b_t, r_t, chi_t, _ = _taylor_trial(du, jb, dlog, lpp, None, wy, None, "")
    b_e, r_e, chi_e, _ = _evaluate(u + du, None, wy, w, lags, geom, "fluence")
    assert_allclose(b_t, b_e, rtol=1e-9)
    assert_allclose(chi_t, chi_e, rtol=1e-9)
    assert np.max(np.abs(r_t - r_e)) < 1e-6  # weighted residuals (noise sd = 1)


@pytest.mark.parametrize("observable", ["fluence", "flux"])
def test_model_table_matches_exact_evaluation_inside_and_outside(observable):
    """Source: common practice - the tabulated model (nearest node + second-order expansion)
    agrees with an exact evaluation of the forward model; points outside the table are
    evaluated exactly."""
    rng = np.random.default_rng(8)
    lags = np.geomspace(1e-6, 3e-3, 64)
    geom, u, w, wy = _noisy_rows(rng, 60, lags, 3.0)
    table = _ModelTable({k: v[:1] for k, v in geom.items()}, lags, observable,
                        np.log(0.75e-8), np.log(1.3e-8))  # fmt: skip
    inside = (u >= table.lo) & (u <= table.hi)
    assert inside.any() and not inside.all()
    with np.errstate(all="ignore"):
        got = _model_trial(u, None, wy, w, lags, geom, observable, None, "", "", table)
        exact = _exact_trial(u, None, wy, w, lags, geom, observable, None, "", "")
    assert_allclose(got[0], exact[0], rtol=1e-9)  # beta
    assert_allclose(got[2], exact[2], rtol=1e-9)  # chi^2
    big = exact[4] > 1e-12 * w
    assert np.max(np.abs(got[4][big] / exact[4][big] - 1)) < 2e-9  # w * g1^2
    assert np.array_equal(got[4][~inside], exact[4][~inside])  # outside: exact values


def test_iteration_same_with_table_workspace_or_neither():
    """Source: common practice - the tabulated model and the reused scratch arrays are
    implementation details: the fitted log BFi and beta do not depend on them (beyond the
    table's ~1e-9 model error)."""
    rng = np.random.default_rng(12)
    lags = np.geomspace(1e-6, 3e-3, 64)
    geom, u_true, w, wy = _noisy_rows(rng, 300, lags, 2.5)
    y = 1.0 + wy / w
    start = u_true + rng.normal(0.0, 0.05, u_true.size)
    beta0 = np.full(u_true.size, 0.5)
    args = (y, w, lags, geom, "fluence", start, beta0, True, 50, 1e-7, 1e-6)
    plain = _lm(*args)
    with_ws = _lm(*args, ws=_Workspace())
    table = _ModelTable({k: v[:1] for k, v in geom.items()}, lags, "fluence",
                        start.min() - 1.0, start.max() + 1.0)  # fmt: skip
    tabled = _lm(*args, ws=_Workspace(), table=table)
    for a, b in zip(plain[:2], with_ws[:2], strict=True):
        assert np.array_equal(a, b)
    assert np.array_equal(plain[4], with_ws[4])
    assert_allclose(tabled[0], plain[0], rtol=0, atol=1e-6)  # log BFi, within ftol's reach
    assert_allclose(tabled[1], plain[1], rtol=1e-5)
    assert np.all(plain[3]) and np.all(tabled[3])
