"""Statistics of simulated recordings: spectra, BFi range, mixing, 1/f fluctuations, task effect."""

import json

import numpy as np
import pytest
from scipy import signal

from fstats.errors import InputError
from fstats.simulate import SimulationSettings, simulate_recording

QUIET = dict(  # everything but the task switched off
    systemic_scale=0.0,
    slow_amplitude_pct=0.0,
    noise_pct=0.0,
    with_motion=False,
    scalp_task_fraction=0.0,
    block_amplitude_cv=0.0,
    outlier_fraction=0.0,
)


def _relative(sim):
    baseline = np.array(list(sim.truth["baseline_bfi_cm2_s"].values()))
    return sim.recording.flow / baseline


def _block_change(times, x, onsets, window=(15.0, 40.0), before=(-8.0, 0.0)):
    """Mean change from the last seconds of rest to the late part of each block."""
    changes = []
    for onset in onsets:
        during = (times >= onset + window[0]) & (times < onset + window[1])
        rest = (times >= onset + before[0]) & (times < onset + before[1])
        changes.append(x[during].mean() - x[rest].mean())
    return float(np.mean(changes))


def test_channels_follow_the_contract():
    """Source: CONTRACTS §3 - scalp 1.0 cm short, frontal_a and frontal_b 3.0 cm long."""
    sim = simulate_recording(SimulationSettings(duration_s=120.0), np.random.default_rng(0))
    rec = sim.recording
    assert rec.channel_names == ("scalp", "frontal_a", "frontal_b")
    assert [c.separation_cm for c in rec.channels] == [1.0, 3.0, 3.0]
    assert rec.short_channels == ("scalp",)
    assert rec.flow_unit == "cm2/s" and rec.n_times == 2400 and rec.sfreq_hz == pytest.approx(20)
    assert rec.count_rate_hz.shape == rec.flow.shape
    assert {"ppg", "resp", "accel_x", "accel_y", "accel_z"} == set(rec.aux)
    json.dumps(sim.truth)  # the truth is JSON-ready


@pytest.mark.parametrize("seed", range(4))
def test_heart_rate_peak_in_flow_spectrum(seed):
    """Source: REFERENCE-CHECKS 6.2 (adult resting heart rate ~60-100 bpm; here 55-90 bpm drawn)
    and scipy.signal.welch - the cardiac fundamental is the largest peak in 0.6-3.5 Hz of every
    channel, within 3 bpm of the heart rate set for the recording."""
    sim = simulate_recording(SimulationSettings(), np.random.default_rng(seed))
    truth = sim.truth
    assert 55.0 <= truth["heart_rate_set_bpm"] <= 90.0
    for i in range(3):
        x = sim.recording.flow[:, i] / np.median(sim.recording.flow[:, i])
        freqs, psd = signal.welch(x, fs=20.0, nperseg=4096)
        band = (freqs > 0.6) & (freqs < 3.5)
        peak_bpm = 60.0 * freqs[band][np.argmax(psd[band])]
        assert peak_bpm == pytest.approx(truth["heart_rate_set_bpm"], abs=3.0)
        assert peak_bpm == pytest.approx(truth["heart_rate_bpm"], abs=2.0)


@pytest.mark.parametrize("heart_rate_bpm", [58.0, 84.0])
def test_requested_heart_rate_and_respiration_appear(heart_rate_bpm):
    """Source: scipy.signal.welch - with fixed rates the scalp-channel PSD peaks at the requested
    heart rate (0.6-3.5 Hz band) and respiration rate (0.13-0.5 Hz band); PPG shares the beats."""
    settings = SimulationSettings(heart_rate_bpm=heart_rate_bpm, resp_rate_hz=0.3)
    sim = simulate_recording(settings, np.random.default_rng(11))
    scalp = sim.recording.channel_flow("scalp")
    freqs, psd = signal.welch(scalp / scalp.mean(), fs=20.0, nperseg=4096)
    cardiac = (freqs > 0.6) & (freqs < 3.5)
    breathing = (freqs > 0.13) & (freqs < 0.5)
    assert 60 * freqs[cardiac][np.argmax(psd[cardiac])] == pytest.approx(heart_rate_bpm, abs=3.0)
    assert freqs[breathing][np.argmax(psd[breathing])] == pytest.approx(0.3, abs=0.03)
    freqs, psd = signal.welch(sim.recording.aux["ppg"].values, fs=20.0, nperseg=4096)
    assert 60 * freqs[cardiac][np.argmax(psd[cardiac])] == pytest.approx(heart_rate_bpm, abs=3.0)


def test_bfi_range_positive_and_brain_near_1e8():
    """Source: REFERENCE-CHECKS 5.4 - adult brain BFi ~1e-8 cm²/s (roughly 0.5-3e-8), recalled
    from memory; every simulated sample is positive and long-channel medians stay in 0.3-3e-8."""
    brain, medians = [], []
    for seed in range(12):
        sim = simulate_recording(SimulationSettings(duration_s=300.0), np.random.default_rng(seed))
        flow = sim.recording.flow
        assert np.all(flow > 0) and np.all(np.isfinite(flow))
        brain.extend(sim.truth["brain_bfi_cm2_s"].values())
        medians.extend(np.median(flow[:, 1:], axis=0))
    assert 0.6e-8 < np.median(brain) < 1.6e-8
    assert 0.3e-8 < min(medians) and max(medians) < 3e-8


@pytest.mark.parametrize("seed", range(3))
def test_regression_recovers_mixing_weights(seed):
    """Source: the mixing model rBF_long = w rBF_brain + (1 - w) rBF_scalp (first-order
    partial-volume approximation, recalled from memory) - least squares (numpy.linalg.lstsq)
    of the *measured* long-channel relative flow on the *measured* short channel and the true
    brain compartment recovers w and (1 - w) within 0.06, with every nuisance switched on."""
    sim = simulate_recording(SimulationSettings(with_motion=False), np.random.default_rng(seed))
    rel = _relative(sim)
    w_short = sim.truth["short_brain_fraction"]
    for k, name in enumerate(("frontal_a", "frontal_b")):
        design = np.column_stack([np.ones(rel.shape[0]), rel[:, 0], sim.components["brain"][:, k]])
        coef = np.linalg.lstsq(design, rel[:, k + 1], rcond=None)[0]
        w = sim.truth["brain_fraction"][name]
        assert coef[1] * (1.0 - w_short) == pytest.approx(1.0 - w, abs=0.06)
        assert coef[2] == pytest.approx(w, abs=0.06)


def test_scalp_task_change_leaks_into_long_channels_by_scalp_weight():
    """Source: the mixing model - a scalp-only change of size s shows as (1 - w) s in a long
    channel and (1 - w_short) s in the short channel (block averages of the written BFi)."""
    settings = SimulationSettings(
        **{**QUIET, "scalp_task_fraction": 1.0}, effect_pct=0.0, scalp_task_pct=20.0
    )
    sim = simulate_recording(settings, np.random.default_rng(5))
    rel = _relative(sim)
    times = sim.recording.times_s
    onsets = sim.recording.events.select("subtract").onsets_s
    short = _block_change(times, rel[:, 0], onsets)
    assert short > 0.1  # the scalp response is there
    for k, name in enumerate(("frontal_a", "frontal_b")):
        expected = (1.0 - sim.truth["brain_fraction"][name]) / (1.0 - 0.05)
        assert _block_change(times, rel[:, k + 1], onsets) / short == pytest.approx(
            expected, rel=1e-6
        )
    assert sim.truth["scalp_leak_pct"]["frontal_a"] == pytest.approx(
        20.0 * (1 - sim.truth["brain_fraction"]["frontal_a"])
    )


def test_block_average_recovers_task_effect():
    """Source: common practice - block averaging (late block minus preceding rest) of a recording
    with only the task response gives w × effect_pct in frontal_a and nothing in frontal_b."""
    settings = SimulationSettings(**{**QUIET, "noise_pct": 1.0}, effect_pct=15.0)
    sim = simulate_recording(settings, np.random.default_rng(8))
    rel = _relative(sim)
    times = sim.recording.times_s
    onsets = sim.recording.events.select("subtract").onsets_s
    change_a = 100 * _block_change(times, rel[:, 1], onsets)
    change_b = 100 * _block_change(times, rel[:, 2], onsets)
    assert change_a == pytest.approx(sim.truth["long_effect_pct"]["frontal_a"], rel=0.03)
    assert sim.truth["long_effect_pct"]["frontal_a"] == pytest.approx(
        15.0 * sim.truth["brain_fraction"]["frontal_a"]
    )
    assert abs(change_b) < 0.3


def test_block_average_with_all_nuisances_is_close():
    """Source: common practice - averaging 20 blocks of a realistic recording (1/f fluctuations,
    systemic signals, noise, no motion) recovers the long-channel effect within ±3 points."""
    settings = SimulationSettings(duration_s=1800.0, with_motion=False, scalp_task_fraction=0.0)
    estimates, truths = [], []
    for seed in range(4):
        sim = simulate_recording(settings, np.random.default_rng(seed))
        rel = _relative(sim)
        onsets = sim.recording.events.select("subtract").onsets_s
        estimates.append(100 * _block_change(sim.recording.times_s, rel[:, 1], onsets))
        gains = np.array(sim.truth["block_gains"])[::2]
        truths.append(sim.truth["long_effect_pct"]["frontal_a"] * gains.mean())
    assert np.mean(estimates) == pytest.approx(np.mean(truths), abs=3.0)


def test_slow_cerebral_fluctuations_have_one_over_f_spectrum():
    """Source: common practice - log-log Welch PSD slope of 1/f^β noise is -β; here β = 1 over
    0.005-0.1 Hz within 0.2, and the power at the block frequency (~0.012 Hz) is well above the
    power at 0.1 Hz. The two brain channels share about half of the variance."""
    settings = SimulationSettings(duration_s=3600.0, sfreq_hz=10.0, with_aux=False)
    slopes, ratios, correlations = [], [], []
    for seed in range(4):
        sim = simulate_recording(settings, np.random.default_rng(seed))
        slow = sim.components["slow"]
        assert slow.std(axis=0).mean() == pytest.approx(
            sim.truth["slow_amplitude_pct"] / 100, rel=0.5
        )
        freqs, psd = signal.welch(slow[:, 0], fs=10.0, nperseg=8192)
        keep = (freqs >= 0.005) & (freqs <= 0.1)
        slopes.append(np.polyfit(np.log10(freqs[keep]), np.log10(psd[keep]), 1)[0])
        ratios.append(np.interp(0.012, freqs, psd) / np.interp(0.1, freqs, psd))
        correlations.append(np.corrcoef(slow.T)[0, 1])
    assert np.mean(slopes) == pytest.approx(-1.0, abs=0.2)
    assert np.median(ratios) > 4.0
    assert np.mean(correlations) == pytest.approx(0.5, abs=0.2)


def test_noise_grows_as_count_rate_falls():
    """Source: Zhou et al. 2006 (Opt Express 14:1125) low-count regime, recalled from memory -
    relative BFi noise ∝ 1/count rate: measured noise ratio long/short equals the inverse
    count-rate ratio within 10 %, and the 3 cm channels are noisier than the 1 cm channel."""
    settings = SimulationSettings(**{**QUIET, "noise_pct": 4.0}, effect_pct=0.0)
    sim = simulate_recording(settings, np.random.default_rng(2))
    noise = (_relative(sim) - 1.0).std(axis=0)
    rates = np.array(list(sim.truth["mean_count_rate_hz"].values()))
    assert noise[1] > noise[0] and noise[2] > noise[0]
    np.testing.assert_allclose(noise[1:] / noise[0], rates[0] / rates[1:], rtol=0.1)
    np.testing.assert_allclose(noise[1], 0.04 * 20e3 / rates[1], rtol=0.1)


def test_motion_events_hit_all_channels_hardest_in_scalp():
    """Source: common practice - head motion disturbs every channel at once, the scalp most;
    the accelerometer moves at the same moments."""
    settings = SimulationSettings(max_motion_events=3, duration_s=600.0)
    for seed in range(20):
        sim = simulate_recording(settings, np.random.default_rng(seed))
        events = sim.truth["motion_events"]
        if any(e["kind"] == "spike" for e in events):
            break
    spike = next(e for e in events if e["kind"] == "spike")
    times = sim.recording.times_s
    at = np.argmin(np.abs(times - (spike["onset_s"] + spike["duration_s"] / 2)))
    factor = sim.components["motion"][at]
    assert abs(factor[0] - 1) > abs(factor[1] - 1) > 0 and abs(factor[2] - 1) > 0
    accel = np.sqrt(sum(sim.recording.aux[f"accel_{a}"].values ** 2 for a in "xyz"))
    inside = np.abs(times - spike["onset_s"] - spike["duration_s"] / 2) < spike["duration_s"] / 4
    quiet = np.abs(times - spike["onset_s"]) > 30
    assert np.abs(accel[inside] - 1).mean() > 5 * np.abs(accel[quiet] - 1).mean()


def test_same_seed_same_recording_and_different_seed_differs():
    """Source: common practice - all randomness comes from the passed numpy Generator."""
    settings = SimulationSettings(duration_s=200.0)
    first = simulate_recording(settings, np.random.default_rng(42))
    second = simulate_recording(settings, np.random.default_rng(42))
    other = simulate_recording(settings, np.random.default_rng(43))
    np.testing.assert_array_equal(first.recording.flow, second.recording.flow)
    np.testing.assert_array_equal(
        first.recording.aux["ppg"].values, second.recording.aux["ppg"].values
    )
    assert json.dumps(first.truth) == json.dumps(second.truth)
    assert not np.allclose(first.recording.flow, other.recording.flow, rtol=1e-3, atol=0.0)


def test_event_design_has_cues_and_effect():
    """Source: CONTRACTS §3 - event variant: condition 'cue', 1 s events, jittered ISI 12-20 s;
    the cerebral response follows each cue (event-locked average peaks 3-7 s after onset)."""
    settings = SimulationSettings(**QUIET, design="event", effect_pct=30.0, duration_s=600.0)
    sim = simulate_recording(settings, np.random.default_rng(1))
    events = sim.recording.events
    assert set(events.conditions) == {"cue"} and settings.task_label == "cue"
    isi = np.diff(events.onsets_s)
    assert isi.min() >= 12.0 and isi.max() <= 20.0
    rel = _relative(sim)[:, 1]
    lags = np.arange(0, 12 * 20)
    epochs = np.array([rel[int(o * 20) + lags] for o in events.onsets_s[:-1]])
    peak_s = lags[np.argmax(epochs.mean(axis=0))] / 20.0
    assert 3.0 <= peak_s <= 7.0


def test_settings_refuse_bad_values():
    """Source: common practice - bad settings name the field and what was expected."""
    with pytest.raises(InputError, match="design"):
        SimulationSettings(design="blocks")
    with pytest.raises(InputError, match="sfreq_hz"):
        SimulationSettings(sfreq_hz=2.0)
    with pytest.raises(InputError, match="scalp_task_fraction"):
        SimulationSettings(scalp_task_fraction=1.5)


def test_task_locked_heart_rate_increase():
    """Source: recalled from memory - mental arithmetic raises heart rate by a few bpm; the
    simulator's beat-to-beat rate is higher late in the task blocks than in the rest before,
    by about task_heart_rate_bpm (within 2 bpm, averaged over blocks)."""
    settings = SimulationSettings(
        duration_s=1800.0, scalp_task_fraction=1.0, task_heart_rate_bpm=6.0, with_aux=False
    )
    sim = simulate_recording(settings, np.random.default_rng(6))
    beats = sim.components["beats_s"]
    rate = 60.0 / np.diff(beats)
    mid = beats[:-1] + np.diff(beats) / 2
    onsets = sim.recording.events.select("subtract").onsets_s
    change = _block_change(mid, rate, onsets, window=(25.0, 40.0), before=(-15.0, 0.0))
    assert sim.truth["task_heart_rate_bpm"] == 6.0
    assert change == pytest.approx(6.0, abs=2.0)


def test_systemic_signals_reach_the_brain_with_the_set_lag():
    """Source: common practice (cross-correlation lag estimate) - the slow systemic part of the
    brain compartment (Mayer band, 0.05-0.15 Hz, scipy Butterworth band-pass) lags the scalp's
    by truth['systemic_lag_s'] within 0.3 s."""
    for seed in range(3):
        sim = simulate_recording(SimulationSettings(with_aux=False), np.random.default_rng(seed))
        sos = signal.butter(2, [0.05, 0.15], btype="bandpass", fs=20.0, output="sos")
        scalp = signal.sosfiltfilt(sos, sim.components["scalp_systemic"])
        brain = signal.sosfiltfilt(sos, sim.components["brain_systemic"])
        lags = np.arange(0, 6 * 20)
        xcorr = [np.dot(scalp[: scalp.size - k], brain[k:]) for k in lags]
        assert lags[np.argmax(xcorr)] / 20.0 == pytest.approx(sim.truth["systemic_lag_s"], abs=0.3)


def test_pulsatile_amplitude_larger_in_scalp():
    """Source: common practice - the cardiac pulsation is stronger in scalp than in brain flow;
    cardiac-band (0.7-3.5 Hz) relative power of the scalp channel exceeds the long channels'
    brain-only compartment, and the long channels sit in between (mixing)."""
    settings = SimulationSettings(noise_pct=0.0, with_motion=False, with_aux=False)
    sim = simulate_recording(settings, np.random.default_rng(3))
    sos = signal.butter(4, [0.7, 3.5], btype="bandpass", fs=20.0, output="sos")
    band = lambda x: signal.sosfiltfilt(sos, x).std()  # noqa: E731
    rel = _relative(sim)
    scalp = band(sim.components["scalp"])
    brain = band(sim.components["brain"][:, 0])
    assert scalp > 1.5 * brain
    assert brain < band(rel[:, 1]) < scalp
    assert band(rel[:, 0]) == pytest.approx(scalp, rel=0.1)


def _ols_z(sim):
    """OLS t of a block regressor (simulator kernel) on frontal_a, with short channel + trend."""
    from fstats.simulate.task import cerebral_kernel, evoked_response

    rec = sim.recording
    t = rec.times_s
    task = evoked_response(t, rec.events, {"subtract": 1.0}, cerebral_kernel(rec.sfreq_hz))
    rel = _relative(sim)
    design = np.column_stack([np.ones_like(t), task, rel[:, 0], t - t.mean()])
    coef, *_ = np.linalg.lstsq(design, rel[:, 1], rcond=None)
    resid = rel[:, 1] - design @ coef
    cov = np.linalg.inv(design.T @ design) * (resid @ resid) / (t.size - design.shape[1])
    return coef[1] / np.sqrt(cov[1, 1])


def test_null_recordings_make_ols_overconfident_but_white_noise_does_not():
    """Source: common practice - serially correlated (1/f) noise at the block frequency inflates
    OLS t statistics; with only white measurement noise they are standard normal (sd ≈ 1).
    Over 40 null recordings the sd of the OLS t exceeds 2 with the default nuisances and lies
    within 0.7-1.4 with white noise only."""
    null = SimulationSettings(effect_pct=0.0, duration_s=600.0, sfreq_hz=10.0, with_aux=False)
    white = SimulationSettings(
        **{**QUIET, "noise_pct": 4.0},
        effect_pct=0.0,
        duration_s=600.0,
        sfreq_hz=10.0,
        with_aux=False,
    )
    z_null = [_ols_z(simulate_recording(null, np.random.default_rng(100 + i))) for i in range(40)]
    z_white = [_ols_z(simulate_recording(white, np.random.default_rng(200 + i))) for i in range(40)]
    assert np.std(z_null) > 2.0
    assert 0.7 < np.std(z_white) < 1.4
