"""Heartbeat detection and RETROICOR cardiac terms."""

import numpy as np
import pytest
from numpy.testing import assert_allclose

from fstats.design.cardiac import cardiac_phase, detect_heartbeats, retroicor_terms


def _beat_times(rng, duration_s, rate_bpm, *, rsa=0.05, jitter=0.02, resp_hz=0.25):
    """Beat times with heart-rate variability: respiratory sinus arrhythmia + random jitter."""
    beats = [0.4]
    mean_ibi = 60.0 / rate_bpm
    while beats[-1] < duration_s + 2:
        t = beats[-1]
        ibi = (
            mean_ibi * (1 + rsa * np.sin(2 * np.pi * resp_hz * t)) + jitter * rng.standard_normal()
        )
        beats.append(t + ibi)
    return np.array(beats)


def _pulse_wave(times, beats):
    """Non-sinusoidal pulse: fast systolic upstroke, slow decay and a dicrotic bump."""
    k = np.searchsorted(beats, times, side="right") - 1
    k = np.clip(k, 0, beats.size - 2)
    since = times - beats[k]
    since = np.where(since < 0, 10.0, since)  # before the first beat: flat
    wave = (1 - np.exp(-since / 0.03)) * np.exp(-since / 0.25)
    wave += 0.3 * np.exp(-(((since - 0.35) / 0.05) ** 2))
    return wave


def _pulsatile_flow(rng, fs, duration_s, rate_bpm):
    times = np.arange(0.0, duration_s, 1 / fs)
    beats = _beat_times(rng, duration_s, rate_bpm)
    flow = 1e-8 * (
        1
        + 0.15 * _pulse_wave(times, beats)
        + 0.05 * np.sin(2 * np.pi * 0.25 * times)  # respiration
        + 0.05 * np.sin(2 * np.pi * 0.1 * times)  # Mayer waves
        + 0.0005 * times / duration_s * 100  # drift
        + 0.02 * rng.standard_normal(times.size)
    )
    ibi = np.diff(beats[(beats > 0) & (beats < duration_s)])
    return times, flow, beats, 60.0 / np.median(ibi)


@pytest.mark.parametrize(
    ("seed", "rate_bpm", "fs"), [(0, 58.0, 20.0), (1, 72.0, 20.0), (2, 95.0, 10.0)]
)
def test_heart_rate_recovered_from_pulsatile_flow(seed, rate_bpm, fs):
    """Source: common practice - resting adult heart rate 60-100 bpm (REFERENCE-CHECKS 6.2);
    a detector must recover the true median rate of a synthetic non-sinusoidal pulse with
    HRV (respiratory sinus arrhythmia, jitter), noise, respiration and drift within 2 bpm."""
    rng = np.random.default_rng(seed)
    times, flow, beats, true_rate = _pulsatile_flow(rng, fs, 300.0, rate_bpm)
    hb = detect_heartbeats(flow, fs, start_s=times[0])
    assert abs(hb.heart_rate_bpm - true_rate) < 2.0
    true_inside = beats[(beats > times[0] + 1) & (beats < times[-1] - 1)]
    assert abs(hb.n_beats - true_inside.size) <= 3
    assert hb.beat_quality > 0.9
    # every detected beat sits at a consistent delay after a true beat
    k = np.searchsorted(beats, hb.beat_times_s) - 1
    delay = hb.beat_times_s - beats[np.clip(k, 0, None)]
    assert np.std(delay[1:-1]) < 0.05


def test_heart_rate_recovered_from_ppg_like_signal_at_its_own_rate():
    """Source: common practice - a PPG waveform (systolic peak + dicrotic notch) sampled at
    50 Hz; true median rate recovered within 2 bpm."""
    rng = np.random.default_rng(7)
    fs = 50.0
    times = np.arange(3.0, 243.0, 1 / fs)
    beats = _beat_times(rng, 245.0, 66.0, rsa=0.08)
    ppg = _pulse_wave(times - 0.2, beats) + 0.05 * rng.standard_normal(times.size)
    hb = detect_heartbeats(ppg, fs, start_s=times[0])
    inside = beats[(beats > times[0]) & (beats < times[-1])]
    assert abs(hb.heart_rate_bpm - 60.0 / np.median(np.diff(inside))) < 2.0
    assert hb.beat_times_s.min() >= times[0]


def test_beat_quality_drops_for_irregular_detections():
    """Source: common practice - quality is the fraction of physiological, consistent
    inter-beat intervals; pure noise should not look like a clean heartbeat series."""
    rng = np.random.default_rng(11)
    noise = rng.standard_normal(20 * 120)
    times, flow, _, _ = _pulsatile_flow(np.random.default_rng(1), 20.0, 120.0, 70.0)
    clean = detect_heartbeats(flow, 20.0).beat_quality
    noisy = detect_heartbeats(noise, 20.0).beat_quality
    assert clean > 0.95
    assert noisy < 0.8  # below the threshold at which build_design warns


def test_detection_rejects_too_low_sampling_rate():
    """Source: REFERENCE-CHECKS 6.2/7.1 - cardiac harmonics need sampling well above 2 Hz."""
    with pytest.raises(ValueError):
        detect_heartbeats(np.zeros(200), 1.0)


def test_cardiac_phase_formula():
    """Source: Glover, Li & Ress 2000 (RETROICOR) - phi = 2 pi (t - t_k)/(t_{k+1} - t_k),
    in [0, 2 pi), undefined (NaN) before the first and from the last beat."""
    beats = np.array([1.0, 1.8, 2.7, 3.5])
    t = np.array([0.5, 1.0, 1.4, 1.8, 2.25, 3.49, 3.5, 4.0])
    phi = cardiac_phase(t, beats)
    expected = [
        np.nan,
        0.0,
        2 * np.pi * 0.4 / 0.8,
        0.0,
        2 * np.pi * 0.45 / 0.9,
        2 * np.pi * 0.79 / 0.8,
        np.nan,
        np.nan,
    ]
    assert_allclose(phi, expected, atol=1e-12)
    valid = phi[np.isfinite(phi)]
    assert np.all((valid >= 0) & (valid < 2 * np.pi))


def test_retroicor_recovers_known_coefficients():
    """Source: REFERENCE-CHECKS 6.1 [computed] - a signal built from known RETROICOR
    coefficients (72 bpm, M=2) plus intercept is recovered by least squares to 1e-10; the
    design has 2M columns; terms are 0 outside the first/last beat."""
    rng = np.random.default_rng(5)
    fs = 20.0
    times = np.arange(0.0, 120.0, 1 / fs)
    beats = np.cumsum(np.full(150, 60 / 72) + 0.02 * rng.standard_normal(150)) - 0.3
    terms = retroicor_terms(times, beats, 2)
    assert terms.shape == (times.size, 4)
    phi = cardiac_phase(times, beats)
    valid = np.isfinite(phi)
    by_formula = np.column_stack([np.cos(phi), np.sin(phi), np.cos(2 * phi), np.sin(2 * phi)])
    assert_allclose(terms[valid], by_formula[valid], atol=1e-12)
    assert np.all(terms[~valid] == 0.0)
    coef = np.array([0.8, -0.3, 0.25, 0.1])
    y = 3.0 + terms @ coef
    x = np.column_stack([np.ones(times.size), terms])
    est = np.linalg.lstsq(x, y, rcond=None)[0]
    assert_allclose(est, np.r_[3.0, coef], atol=1e-10)
