"""Heart beats, pulse waveforms and respiration of the simulator."""

import numpy as np
import pytest
from scipy import signal

from fstats.simulate.physiology import beat_times, pulse_train, pulse_waveform, respiration


def test_beat_intervals_match_heart_rate_with_variability():
    """Source: recalled from memory - resting adult RR intervals vary by a few percent
    (SDNN ~30-60 ms).

    The mean interval is 60/HR; the coefficient of variation lies between 2 % and 8 %.
    """
    rng = np.random.default_rng(0)
    for heart_rate in (55.0, 72.0, 90.0):
        beats = beat_times(900.0, heart_rate, rng, resp_phase=lambda t: 2 * np.pi * 0.25 * t)
        rr = np.diff(beats)
        assert rr.mean() == pytest.approx(60.0 / heart_rate, rel=0.05)
        assert 0.02 < rr.std() / rr.mean() < 0.08
        assert beats[0] <= 0.0 and beats[-1] >= 900.0


def test_flow_pulse_has_systolic_peak_notch_and_dicrotic_wave():
    """Source: recalled from memory - an arterial flow pulse rises fast to a systolic peak,
    dips at the dicrotic notch, then shows a smaller diastolic (dicrotic) wave."""
    tau = np.linspace(0.0, 0.85, 8501)
    wave = pulse_waveform(tau, 0.85)
    assert wave[0] == 0.0
    peaks, _ = signal.find_peaks(wave)
    troughs, _ = signal.find_peaks(-wave)
    assert len(peaks) == 2 and len(troughs) >= 1
    systolic, dicrotic = peaks
    notch = troughs[(troughs > systolic) & (troughs < dicrotic)][0]
    assert tau[systolic] < 0.25 * 0.85 + 0.1  # fast rise
    assert wave[systolic] == pytest.approx(1.0, abs=0.05)
    assert wave[notch] < wave[dicrotic] < wave[systolic]
    # skewed: the rise to the peak is shorter than the fall back to half height
    half = wave[systolic] / 2
    rise = tau[systolic] - tau[np.argmax(wave > half)]
    fall = tau[systolic + np.argmax(wave[systolic:] < half)] - tau[systolic]
    assert rise < fall


def test_pulse_train_spectrum_peaks_at_heart_rate():
    """Source: common practice - a pulse train's Welch PSD peaks at its mean beat rate
    (within 0.04 Hz: the slow heart-rate wander moves the spectral mode a little)."""
    rng = np.random.default_rng(1)
    times = np.arange(0, 600, 0.05)
    beats = beat_times(600.0, 66.0, rng)
    wave = pulse_train(times, beats, rng)
    freqs, psd = signal.welch(wave, fs=20.0, nperseg=4096)
    band = (freqs > 0.6) & (freqs < 3.5)
    realised = 1.0 / np.mean(np.diff(beats))
    assert freqs[band][np.argmax(psd[band])] == pytest.approx(realised, abs=0.04)
    assert abs(wave.mean()) < 1e-12


def test_respiration_peaks_at_its_rate():
    """Source: common practice - Welch PSD of the breathing signal peaks at the breathing rate."""
    rng = np.random.default_rng(2)
    times = np.arange(0, 900, 0.05)
    for rate in (0.15, 0.25, 0.35):
        resp, phase = respiration(times, rate, rng)
        freqs, psd = signal.welch(resp, fs=20.0, nperseg=4096)
        assert freqs[np.argmax(psd)] == pytest.approx(rate, abs=0.015)
        assert resp.std() == pytest.approx(1.0)
        assert np.all(np.diff(phase) > 0)
