"""Tests of fstats/flow/g2_to_flow.py and fstats/flow/cleaning.py: a recording's g2 -> flow."""

import warnings

import numpy as np
import pytest
from numpy.testing import assert_allclose

from fstats.errors import InputError, QualityWarning
from fstats.flow import clean_flow, fit_g2, flow_from_g2, relative_flow
from fstats.flow.forward import g1_semi_infinite, g2_from_g1
from fstats.flow.noise import g2_noise_sd, multi_tau_lags
from fstats.inputs import Channel, Recording, TaskTiming

FS = 20.0
LAGS = multi_tau_lags(60)


def _recording(rng, duration_s=60.0, count_rate_hz=120e3):
    """Three channels (1, 3, 3 cm) with flow pulsing at 1.2 Hz; noisy g2 (Zhou et al. 2006
    noise form, recalled from memory) at a high count rate."""
    t = np.arange(0, duration_s, 1 / FS)
    channels = (
        Channel("scalp", 1.0, True, 785.0),
        Channel("frontal_a", 3.0, False, 785.0),
        Channel("frontal_b", 3.0, False, 785.0),
    )
    base = np.array([0.6e-8, 1.0e-8, 1.2e-8])
    truth = base * (1 + 0.1 * np.sin(2 * np.pi * 1.2 * t))[:, None]
    g2 = np.empty((t.size, 3, LAGS.size))
    for c, ch in enumerate(channels):
        g1 = g1_semi_infinite(LAGS, truth[:, c], separation_cm=ch.separation_cm)
        tau_e = LAGS[np.argmin(np.abs(g1 - np.exp(-1)), axis=1)]
        sd = g2_noise_sd(
            LAGS,
            beta=0.5,
            decay_rate_hz=1 / tau_e,
            count_rate_hz=count_rate_hz,
            integration_time_s=1 / FS,
        )
        g2[:, c, :] = g2_from_g1(g1, 0.5) + sd * rng.standard_normal(g1.shape)
    events = TaskTiming(np.array([20.0]), np.array([20.0]), ("subtract",), np.ones(1), "test")
    rec = Recording(
        times_s=t,
        flow=np.full((t.size, 3), np.nan),
        channels=channels,
        events=events,
        g2=g2,
        lags_s=LAGS,
        count_rate_hz=np.full((t.size, 3), count_rate_hz),
        source="memory",
        provenance={"flow_missing": True},
    )
    return rec, truth


def test_flow_from_g2_fills_flow_equal_to_fit_g2():
    """Source: common practice - the recording-level path gives exactly the per-curve fits."""
    rng = np.random.default_rng(0)
    rec, truth = _recording(rng)
    out = flow_from_g2(rec, motion="none", weighting="uniform")
    assert out.flow_unit == "cm2/s" and out.flow.shape == truth.shape
    direct = fit_g2(rec.g2[:, 1, :], LAGS, separation_cm=3.0)
    assert_allclose(out.flow[:, 1], direct.bfi_cm2_s, rtol=1e-12)
    assert np.median(np.abs(out.flow / truth - 1)) < 0.1
    prov = out.provenance["flow"]
    assert prov["curves"]["frontal_a"]["n_curves"] == rec.n_times
    assert prov["masks"]["exclude"].shape == truth.shape
    assert prov["beta"].shape == truth.shape
    assert rec.provenance == {"flow_missing": True}  # input untouched
    assert np.all(np.isnan(rec.flow))


def test_bad_curves_become_masked_samples_not_errors():
    """Source: common practice - NaN, non-decaying, below-1 and zero-count curves are
    reported per curve and masked; the recording is still processed."""
    rng = np.random.default_rng(1)
    rec, _ = _recording(rng)
    g2 = rec.g2.copy()
    g2[100, 1, 5] = np.nan
    g2[200, 1, :] = 1.4
    g2[300, 2, :] -= 0.7
    rates = rec.count_rate_hz.copy()
    rates[400, 0] = 0.0
    bad = Recording(**{**rec.__dict__, "g2": g2, "count_rate_hz": rates})
    out = flow_from_g2(bad, motion="none", max_gap_s=0.0)
    prov = out.provenance["flow"]
    assert prov["curves"]["frontal_a"]["reasons"]["non-finite g2"] == 1
    assert prov["curves"]["frontal_a"]["reasons"]["non-decaying g2"] == 1
    assert prov["curves"]["frontal_b"]["reasons"]["g2 below 1"] == 1
    assert prov["curves"]["scalp"]["reasons"]["zero count rate"] == 1
    for row, col in [(100, 1), (200, 1), (300, 2), (400, 0)]:
        assert np.isnan(out.flow[row, col])
        assert prov["masks"]["bad_curve"][row, col] and prov["masks"]["exclude"][row, col]


def test_short_gaps_from_bad_curves_are_interpolated_and_stay_excluded():
    """Source: common practice - a single failed sample is bridged but not trusted."""
    rng = np.random.default_rng(2)
    rec, _ = _recording(rng)
    g2 = rec.g2.copy()
    g2[150, 1, :] = np.nan
    out = flow_from_g2(Recording(**{**rec.__dict__, "g2": g2}), motion="none")
    masks = out.provenance["flow"]["masks"]
    assert np.isfinite(out.flow[150, 1])
    assert masks["filled"][150, 1] and masks["exclude"][150, 1]


def test_relative_flow_and_provenance_steps():
    """Source: common practice - rBF has mean 1 over the baseline window; every step is
    recorded with its settings."""
    rng = np.random.default_rng(3)
    rec, _ = _recording(rng)
    out = flow_from_g2(rec, baseline_window_s=(0.0, 19.95), lowpass_hz=4.0)
    prov = out.provenance["flow"]
    assert out.flow_unit == "relative"
    use = (out.times_s <= 19.95)[:, None] & ~prov["masks"]["exclude"]
    # low-pass after rBF keeps the baseline mean near 1
    for c in range(3):
        assert np.mean(out.flow[use[:, c], c]) == pytest.approx(1.0, abs=0.01)
    assert prov["steps"] == [
        "g2 fit",
        "fill short gaps",
        "motion (mark)",
        "relative flow",
        "low-pass",
    ]
    assert prov["relative"]["baseline_window_s"] == [0.0, 19.95]
    assert prov["lowpass"]["cutoff_hz"] == 4.0
    assert set(prov["motion"]["segments_s"]) == {"scalp", "frontal_a", "frontal_b"}


def test_resampling_moves_masks_and_drops_g2():
    """Source: common practice - resampled output keeps masks on the new time base."""
    rng = np.random.default_rng(4)
    rec, _ = _recording(rng, duration_s=30.0)
    out = flow_from_g2(rec, resample_hz=10.0)
    assert out.n_times == rec.n_times // 2
    assert out.provenance["flow"]["masks"]["exclude"].shape == (out.n_times, 3)
    assert out.g2 is None and out.lags_s is None
    assert out.sfreq_hz == pytest.approx(10.0)


def test_recording_without_g2_is_refused():
    """Source: common practice - a clear input error, not a crash."""
    t = np.arange(0, 10, 0.05)
    rec = Recording(t, np.ones((t.size, 1)), (Channel("a", 3.0, False),), source="x_flow.tsv")
    with pytest.raises(InputError, match="x_flow.tsv, g2"):
        flow_from_g2(rec)


def test_noise_model_without_count_rates_is_refused():
    """Source: common practice - the noise model needs photon count rates."""
    rng = np.random.default_rng(5)
    rec, _ = _recording(rng, duration_s=10.0)
    no_rates = Recording(**{**rec.__dict__, "count_rate_hz": None})
    with pytest.raises(InputError, match="count_rate_hz"):
        flow_from_g2(no_rates, weighting="noise-model")
    out = flow_from_g2(no_rates)  # auto -> uniform
    assert out.provenance["flow"]["fit"]["weighting"] == "uniform"


def test_clean_flow_on_a_bfi_recording_marks_motion():
    """Source: common practice - flow QC also runs on recordings that came as BFi."""
    t = np.arange(0, 120, 1 / FS)
    rng = np.random.default_rng(6)
    flow = 1e-8 * (1 + 0.1 * np.sin(2 * np.pi * 1.1 * t) + 0.02 * rng.standard_normal(t.size))
    flow[t >= 60] *= 1.7
    rec = Recording(t, flow[:, None], (Channel("frontal_a", 3.0, False),), source="mem")
    out = clean_flow(rec, motion="baseline")
    assert out.provenance["flow"]["masks"]["motion"][:, 0].any()
    assert np.median(out.flow[t > 70, 0]) == pytest.approx(np.median(flow[t < 55]), rel=0.03)
    rel = relative_flow(out, (0.0, 50.0))
    assert rel.flow_unit == "relative"
    with pytest.raises(ValueError, match="already relative"):
        relative_flow(rel, (0.0, 50.0))


def test_heavy_failure_warns_with_quality_warning():
    """Source: common practice - a channel with many failed curves is reported, not fatal."""
    rng = np.random.default_rng(7)
    rec, _ = _recording(rng, duration_s=10.0)
    g2 = rec.g2.copy()
    g2[:, 2, :] = 1.0 + 0.5 * np.ones(LAGS.size)  # nothing decays
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        out = flow_from_g2(Recording(**{**rec.__dict__, "g2": g2}))
    assert any(
        issubclass(w.category, QualityWarning) and "frontal_b" in str(w.message) for w in caught
    )
    assert np.all(np.isnan(out.flow[:, 2])) and np.isfinite(out.flow[:, :2]).all()


def test_unknown_channel_wavelength_falls_back_to_default():
    """Source: common practice - SNIRF stores NaN for an unknown wavelength; the fit then uses
    the documented default (785 nm) instead of propagating NaN."""
    rng = np.random.default_rng(8)
    rec, _ = _recording(rng, duration_s=5.0)
    channels = tuple(
        Channel(c.name, c.separation_cm, c.is_short, float("nan")) for c in rec.channels
    )
    out = flow_from_g2(Recording(**{**rec.__dict__, "channels": channels}), motion="none")
    ref = flow_from_g2(rec, motion="none")
    assert_allclose(out.flow, ref.flow, rtol=1e-12)
    assert out.provenance["flow"]["curves"]["scalp"]["wavelength_nm"] == 785.0


def test_per_channel_optics_mapping():
    """Source: REFERENCE-CHECKS 5.1 - g1 depends on musp; a channel given a different musp
    gets a different BFi, the others are unchanged; a missing channel is refused."""
    rng = np.random.default_rng(9)
    rec, _ = _recording(rng, duration_s=5.0)
    base = flow_from_g2(rec, motion="none")
    other = flow_from_g2(
        rec, motion="none", musp_per_cm={"scalp": 10.0, "frontal_a": 8.0, "frontal_b": 10.0}
    )
    assert_allclose(other.flow[:, [0, 2]], base.flow[:, [0, 2]], rtol=1e-12)
    assert not np.allclose(other.flow[:, 1], base.flow[:, 1], rtol=1e-3, atol=0.0)
    with pytest.raises(ValueError, match="frontal_b"):
        flow_from_g2(rec, musp_per_cm={"scalp": 10.0, "frontal_a": 8.0})
