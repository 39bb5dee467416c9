"""Tests of fstats/flow/fitting.py: the batched BFi/beta fitter, against scipy curve_fit."""

import numpy as np
import pytest
from numpy.testing import assert_allclose
from scipy.optimize import curve_fit

from fstats.flow.fitting import fit_g2
from fstats.flow.forward import effective_reflection, g1_semi_infinite, g2_from_g1
from fstats.flow.noise import g2_noise_sd, multi_tau_lags

LAGS = multi_tau_lags(100)  # 1 us .. 49 ms, 8 lags per level


def _reference_g2(tau, log_bfi, beta, rho, mua=0.1, musp=10.0, n=1.4, wavelength_nm=785.0):
    """g2 written out from REFERENCE-CHECKS 5.1-5.3 (independent of fstats' code)."""
    reff = effective_reflection(n)
    k0 = 2 * np.pi * n / (wavelength_nm * 1e-7)
    z0 = 1 / musp
    zb = 2 * (1 + reff) / (3 * musp * (1 - reff))
    r1 = np.hypot(rho, z0)
    r2 = np.hypot(rho, z0 + 2 * zb)

    def big_g1(t):
        k = np.sqrt(3 * mua * musp + 6 * musp**2 * k0**2 * np.exp(log_bfi) * t)
        return np.exp(-k * r1) / r1 - np.exp(-k * r2) / r2

    return 1 + beta * (big_g1(tau) / big_g1(0.0)) ** 2


def _noisy_curves(rng, n_curves, rho, *, count_rate_hz, integration_time_s):
    bfi = rng.uniform(0.6e-8, 2.5e-8, n_curves)
    beta = rng.uniform(0.42, 0.52, n_curves)
    g1 = g1_semi_infinite(LAGS, bfi, separation_cm=rho)
    tau_e = LAGS[np.argmin(np.abs(g1 - np.exp(-1)), axis=1)]
    sigma = g2_noise_sd(
        LAGS,
        beta=beta,
        decay_rate_hz=1 / tau_e,
        count_rate_hz=count_rate_hz,
        integration_time_s=integration_time_s,
    )
    g2 = g2_from_g1(g1, beta) + sigma * rng.standard_normal(g1.shape)
    return g2, sigma, bfi, beta


@pytest.mark.parametrize("observable", ["fluence", "flux"])
def test_noise_free_curves_recover_bfi_and_beta(observable):
    """Source: REFERENCE-CHECKS 5.3 - a fit of noise-free simulated g2 recovers beta and
    alpha*Db (rtol 1e-3 asked; the fit reaches ~1e-9)."""
    rng = np.random.default_rng(0)
    bfi = rng.uniform(0.3e-8, 5e-8, 200)
    beta = rng.uniform(0.3, 0.6, 200)
    rho = np.where(np.arange(200) % 2, 1.0, 3.0)
    g2 = g2_from_g1(g1_semi_infinite(LAGS, bfi, separation_cm=rho, observable=observable), beta)
    result = fit_g2(g2, LAGS, separation_cm=rho, observable=observable)
    assert result.fitted.all() and result.converged.all()
    assert_allclose(result.bfi_cm2_s, bfi, rtol=1e-6)
    assert_allclose(result.beta, beta, rtol=1e-6)
    assert np.all(result.status == "ok")


@pytest.mark.parametrize("observable", ["fluence", "flux"])
def test_noise_free_single_channel_recovers_bfi_through_the_model_table(observable):
    """Source: REFERENCE-CHECKS 5.3 - noise-free g2 of one channel (one geometry: the
    fitter reads the model from its table) gives back beta and alpha*Db; chunks of 64
    curves make later chunks reuse and extend the table."""
    rng = np.random.default_rng(21)
    bfi = np.sort(rng.uniform(0.4e-8, 4e-8, 300))  # a slow drift across chunks
    beta = rng.uniform(0.3, 0.6, 300)
    g2 = g2_from_g1(g1_semi_infinite(LAGS, bfi, separation_cm=2.0, observable=observable), beta)
    result = fit_g2(g2, LAGS, separation_cm=2.0, observable=observable, chunk_size=64)
    assert result.fitted.all() and result.converged.all()
    assert_allclose(result.bfi_cm2_s, bfi, rtol=1e-6)
    assert_allclose(result.beta, beta, rtol=1e-6)


def test_fixed_beta_recovers_bfi():
    """Source: REFERENCE-CHECKS 5.3 - with beta fixed at its true value BFi is recovered."""
    bfi = np.array([0.8e-8, 1.6e-8, 3.2e-8])
    g2 = g2_from_g1(g1_semi_infinite(LAGS, bfi, separation_cm=2.5), 0.5)
    result = fit_g2(g2, LAGS, separation_cm=2.5, beta=0.5)
    assert_allclose(result.bfi_cm2_s, bfi, rtol=1e-7)
    assert_allclose(result.beta, 0.5)


def test_noisy_fit_accuracy_and_agreement_with_curve_fit():
    """Source: scipy.optimize.curve_fit (MINPACK Levenberg-Marquardt) run curve by curve on
    the same curves and weights, with the model written out from REFERENCE-CHECKS 5.1-5.3.

    Noise: Zhou et al. 2006 photon-noise model (recalled from memory), 150 kcounts/s, 1 s
    averaging (a 1 Hz DCS recording with pooled detectors), rho 2.5 cm.  Acceptance: median
    relative BFi error < 2 % and per-curve agreement with curve_fit within 0.5 %.
    """
    rng = np.random.default_rng(11)
    rho = 2.5
    g2, sigma, bfi, _ = _noisy_curves(rng, 150, rho, count_rate_hz=150e3, integration_time_s=1.0)
    result = fit_g2(g2, LAGS, separation_cm=rho, weighting=sigma)
    assert result.fitted.all()
    error = result.bfi_cm2_s / bfi - 1
    assert np.median(np.abs(error)) < 0.02
    reference = np.empty((bfi.size, 2))
    for i in range(bfi.size):
        reference[i], _ = curve_fit(
            lambda tau, lb, b: _reference_g2(tau, lb, b, rho),
            LAGS,
            g2[i],
            p0=(np.log(1e-8), 0.5),
            sigma=sigma[i],
        )
    assert np.max(np.abs(result.bfi_cm2_s / np.exp(reference[:, 0]) - 1)) < 0.005
    assert np.max(np.abs(result.beta / reference[:, 1] - 1)) < 0.005
    # the reference itself reaches the same accuracy, so this is a like-for-like comparison
    assert np.median(np.abs(np.exp(reference[:, 0]) / bfi - 1)) < 0.02


def test_noise_model_weighting_is_no_worse_than_uniform():
    """Source: common practice - weighting by the expected noise (Zhou et al. 2006, recalled
    from memory) should not lose precision against equal weights on the same curves."""
    rng = np.random.default_rng(5)
    g2, _, bfi, _ = _noisy_curves(rng, 600, 3.0, count_rate_hz=40e3, integration_time_s=0.1)
    common = {"separation_cm": 3.0, "count_rate_hz": 40e3, "integration_time_s": 0.1}
    weighted = fit_g2(g2, LAGS, weighting="noise-model", **common)
    uniform = fit_g2(g2, LAGS, weighting="uniform", **common)
    both = weighted.fitted & uniform.fitted
    err_w = np.median(np.abs(weighted.bfi_cm2_s[both] / bfi[both] - 1))
    err_u = np.median(np.abs(uniform.bfi_cm2_s[both] / bfi[both] - 1))
    assert err_w <= 1.05 * err_u
    assert np.median(weighted.n_iter[both]) <= 10


def test_chunking_does_not_change_results():
    """Source: common practice - chunked processing gives the same answer as one batch
    (to the convergence tolerance: starting values depend on the chunk's grid)."""
    rng = np.random.default_rng(2)
    g2, sigma, _, _ = _noisy_curves(rng, 50, 3.0, count_rate_hz=80e3, integration_time_s=0.5)
    whole = fit_g2(g2, LAGS, separation_cm=3.0, weighting=sigma)
    chunked = fit_g2(g2, LAGS, separation_cm=3.0, weighting=sigma, chunk_size=7)
    assert_allclose(chunked.bfi_cm2_s, whole.bfi_cm2_s, rtol=1e-5)
    assert np.array_equal(chunked.status, whole.status)


def test_inputs_are_not_modified():
    """Source: common practice - pure functions leave their arguments alone."""
    rng = np.random.default_rng(4)
    g2, sigma, _, _ = _noisy_curves(rng, 20, 2.5, count_rate_hz=80e3, integration_time_s=0.5)
    g2[3, 5] = np.nan
    before, sigma_before, lags_before = g2.copy(), sigma.copy(), LAGS.copy()
    fit_g2(g2, LAGS, separation_cm=2.5, weighting=sigma, decay_floor=0.05)
    assert np.array_equal(g2, before, equal_nan=True)
    assert np.array_equal(sigma, sigma_before) and np.array_equal(LAGS, lags_before)


def test_fit_range_and_decay_floor_limit_the_lags_used():
    """Source: common practice - a lag window or a decay floor restricts the fitted lags,
    and on noise-free curves the estimate does not depend on the range."""
    bfi = np.array([1e-8, 2e-8])
    g2 = g2_from_g1(g1_semi_infinite(LAGS, bfi, separation_cm=3.0), 0.5)
    ranged = fit_g2(g2, LAGS, separation_cm=3.0, fit_range_s=(2e-6, 2e-4))
    expected = int(np.sum((LAGS >= 2e-6) & (LAGS <= 2e-4)))
    assert np.all(ranged.n_lags_used == expected)
    assert_allclose(ranged.bfi_cm2_s, bfi, rtol=1e-6)
    floored = fit_g2(g2, LAGS, separation_cm=3.0, decay_floor=0.1)
    beta_start = np.mean(g2[:, :3] - 1, axis=1, keepdims=True)  # documented starting beta
    excess = (g2 - 1) / beta_start
    assert np.all(floored.n_lags_used == np.sum(excess >= 0.1, axis=1))
    assert floored.n_lags_used[1] < floored.n_lags_used[0]  # faster flow decays sooner
    assert_allclose(floored.bfi_cm2_s, bfi, rtol=1e-6)


def test_bad_curves_are_flagged_with_reasons_and_never_abort():
    """Source: common practice - defective curves are reported per curve, the rest fitted."""
    rng = np.random.default_rng(9)
    good, _, _, _ = _noisy_curves(rng, 8, 2.5, count_rate_hz=100e3, integration_time_s=1.0)
    curves = [row for row in good]
    curves[1] = np.where(np.arange(LAGS.size) == 40, np.nan, good[1])  # NaN
    curves[2] = 1.0 + 0.5 * np.ones(LAGS.size)  # does not decay
    curves[3] = good[3] - 0.6  # below 1
    curves[4] = good[4][:-3]  # wrong lag count
    rate = np.full(8, 80e3)
    rate[5] = 0.0  # zero count rate
    rate[6] = 500.0  # low count rate: fitted but marked
    result = fit_g2(curves, LAGS, separation_cm=2.5, count_rate_hz=rate)
    assert result.status[0] == "ok" and result.status[7] == "ok"
    assert result.status[1] == "non-finite g2"
    assert result.status[2] == "non-decaying g2"
    assert result.status[3] == "g2 below 1"
    assert result.status[4] == "wrong lag count"
    assert result.status[5] == "zero count rate"
    assert "low count rate" in result.status[6] and result.fitted[6]
    assert np.all(np.isnan(result.bfi_cm2_s[1:6])) and np.all(~result.fitted[1:6])
    assert np.all(np.isfinite(result.bfi_cm2_s[[0, 6, 7]]))
    counts = result.reason_counts()
    assert counts["non-finite g2"] == 1 and counts["low count rate"] == 1


def test_wrong_lag_count_in_a_2d_array_flags_every_curve():
    """Source: common practice - a g2 array whose lag axis does not match the lags."""
    result = fit_g2(np.ones((4, 50)), LAGS, separation_cm=2.5)
    assert np.all(result.status == "wrong lag count")


def test_systematic_misfit_is_marked_poor_fit():
    """Source: common practice - a curve that the model cannot follow (two decay components
    well apart) leaves structured residuals; the misfit ratio (von Neumann type ratio of
    squared residuals to squared successive differences) flags it."""
    g1_fast = g1_semi_infinite(LAGS, 5e-8, separation_cm=2.5)
    g1_slow = g1_semi_infinite(LAGS, 0.2e-8, separation_cm=2.5)
    mix = 0.5 * g1_fast + 0.5 * g1_slow
    rng = np.random.default_rng(1)
    g2 = 1 + 0.5 * mix**2 + 0.002 * rng.standard_normal(LAGS.size)
    clean = g2_from_g1(g1_semi_infinite(LAGS, 1e-8, separation_cm=2.5), 0.5)
    clean = clean + 0.002 * rng.standard_normal(LAGS.size)
    result = fit_g2(np.stack([g2, clean]), LAGS, separation_cm=2.5)
    assert "poor fit" in result.status[0]
    assert result.status[1] == "ok"
    assert result.misfit_ratio[0] > 4 > result.misfit_ratio[1]


def test_noise_model_scaling():
    """Source: Koppel 1974 / Zhou et al. 2006 form (recalled from memory): sigma scales as
    sqrt(T/t) with averaging time, and at low counts as 1/<n> (shot noise)."""
    lags = multi_tau_lags(40)
    base = {"beta": 0.5, "decay_rate_hz": 3e4}
    s1 = g2_noise_sd(lags, count_rate_hz=1e4, integration_time_s=0.1, **base)
    s4 = g2_noise_sd(lags, count_rate_hz=1e4, integration_time_s=0.4, **base)
    assert_allclose(s4, s1 / 2, rtol=1e-12)
    low = g2_noise_sd(lags[:1], count_rate_hz=1e2, integration_time_s=1.0, **base)
    lower = g2_noise_sd(lags[:1], count_rate_hz=0.5e2, integration_time_s=1.0, **base)
    assert lower[0] / low[0] == pytest.approx(2.0, rel=0.02)


def test_bad_options_raise():
    """Source: common practice - invalid settings are refused with a clear message."""
    g2 = np.ones((2, LAGS.size))
    with pytest.raises(ValueError, match="weighting"):
        fit_g2(g2, LAGS, separation_cm=2.5, weighting="poisson")
    with pytest.raises(ValueError, match="count_rate_hz"):
        fit_g2(g2, LAGS, separation_cm=2.5, weighting="noise-model")
    with pytest.raises(ValueError, match="beta"):
        fit_g2(g2, LAGS, separation_cm=2.5, beta="free")
    with pytest.raises(ValueError, match="lags_s"):
        fit_g2(g2, LAGS[::-1], separation_cm=2.5)
