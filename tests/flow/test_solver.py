"""Tests of fstats/flow/solver.py: decay products and the batched iteration's building blocks."""

import numpy as np
import pytest
from numpy.testing import assert_allclose

from fstats.flow.forward import _geometry, g1_semi_infinite
from fstats.flow.solver import _evaluate, _g1_squared, decay_product_cm2


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
