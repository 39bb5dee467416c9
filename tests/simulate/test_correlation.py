"""Simulated g2 curves: Siegert intercept, multi-tau lags, BFi recovered by the flow fitter."""

import numpy as np
import pytest

from fstats.simulate.correlation import correlator_lags, simulate_g2


def test_multi_tau_lags_span_the_dcs_range():
    """Source: common practice - multi-tau lags from 0.1 µs, bin width doubling per level."""
    lags = correlator_lags(100)
    assert lags[0] == pytest.approx(1e-7) and 5e-3 < lags[-1] < 3e-2
    assert np.all(np.diff(lags) > 0)


def test_g2_intercept_is_one_plus_beta():
    """Source: REFERENCE-CHECKS 5.3 (Siegert relation g2 = 1 + β|g1|², g1(0) = 1): averaged
    over many noisy curves, g2 - 1 at the first lags equals β·g1² (g1 from the forward model,
    ≥ 0.97 there) within 3 %, and g2 decays to 1 at the last lag."""
    from fstats.flow.forward import g1_semi_infinite

    rng = np.random.default_rng(0)
    n = 3000
    bfi = np.full((n, 2), 1e-8)
    rates = np.column_stack([np.full(n, 150e3), np.full(n, 30e3)])
    beta = np.array([0.5, 0.45])
    g2, lags = simulate_g2(bfi, rates, beta, np.array([1.0, 3.0]), 20.0, rng)
    assert g2.shape == (n, 2, 100)
    for c, sep in enumerate((1.0, 3.0)):
        g1 = g1_semi_infinite(lags[:5], 1e-8, separation_cm=sep)
        assert g1.min() > 0.97
        early = g2[:, c, :5].mean() - 1.0
        assert early == pytest.approx(beta[c] * np.mean(g1**2), rel=0.03)
    assert np.all(np.abs(g2[:, :, -1].mean(axis=0) - 1.0) < 0.01)  # fully decorrelated


def test_flow_fitter_recovers_simulated_bfi():
    """Source: independent implementation - fstats.flow.fitting.fit_g2 (semi-infinite model,
    REFERENCE-CHECKS 5.1) fitted to the simulated curves gives the true BFi (median within 3 %)
    and a scalp-channel (1 cm, 150 kcps) spread smaller than the 3 cm, 30 kcps spread."""
    from fstats.flow.fitting import fit_g2

    rng = np.random.default_rng(1)
    n = 1500
    true = np.column_stack([np.full(n, 0.7e-8), np.full(n, 1.2e-8)])
    rates = np.column_stack([np.full(n, 150e3), np.full(n, 30e3)])
    g2, lags = simulate_g2(true, rates, np.array([0.5, 0.5]), np.array([1.0, 3.0]), 20.0, rng)
    spreads = []
    for c, sep in enumerate((1.0, 3.0)):
        fit = fit_g2(
            g2[:, c, :],
            lags,
            separation_cm=sep,
            weighting="noise-model",
            count_rate_hz=rates[:, c],
            integration_time_s=0.05,
        )
        bfi = fit.bfi_cm2_s[np.isfinite(fit.bfi_cm2_s)]
        assert np.median(bfi) == pytest.approx(true[0, c], rel=0.03)
        spreads.append(np.subtract(*np.percentile(bfi, [75, 25])) / np.median(bfi))
    assert spreads[0] < spreads[1]
