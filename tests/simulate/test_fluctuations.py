"""Spectrally shaped noise: power-law slopes, band peaks, unit variance."""

import numpy as np
import pytest
from scipy import signal

from fstats.simulate.fluctuations import band_noise, lagged, power_law_noise


def _loglog_slope(x, sfreq_hz, band_hz, nperseg):
    freqs, psd = signal.welch(x, fs=sfreq_hz, nperseg=nperseg)
    keep = (freqs >= band_hz[0]) & (freqs <= band_hz[1])
    return np.polyfit(np.log10(freqs[keep]), np.log10(psd[keep]), 1)[0]


@pytest.mark.parametrize("exponent", [0.0, 1.0, 2.0])
def test_power_law_slope_matches_exponent(exponent):
    """Source: common practice - Welch PSD (scipy.signal.welch) of 1/f^b noise has log-log slope -b.

    With the corner at 0.002 Hz the local slope over 0.005-0.1 Hz is within 0.15 of -b
    (closed form -b f²/(f² + f_min²)); we allow 0.2 for the scatter of the estimate.
    """
    rng = np.random.default_rng(3)
    slopes = [
        _loglog_slope(power_law_noise(40000, 10.0, exponent, rng), 10.0, (0.005, 0.1), 8192)
        for _ in range(4)
    ]
    assert np.mean(slopes) == pytest.approx(-exponent, abs=0.2)


def test_power_law_noise_has_unit_variance_on_average():
    """Source: Parseval's theorem - the spectrum is scaled by its expected total power."""
    rng = np.random.default_rng(4)
    variances = [power_law_noise(20000, 20.0, 0.0, rng).var() for _ in range(40)]
    assert np.mean(variances) == pytest.approx(1.0, rel=0.03)
    variances = [power_law_noise(20000, 20.0, 1.0, rng).var() for _ in range(200)]
    assert np.mean(variances) == pytest.approx(1.0, rel=0.1)


def test_band_noise_peaks_at_centre():
    """Source: common practice - a Gaussian spectral peak shows up at its centre in a Welch PSD."""
    rng = np.random.default_rng(5)
    x = band_noise(36000, 20.0, 0.1, 0.01, rng)
    freqs, psd = signal.welch(x, fs=20.0, nperseg=4096)
    assert freqs[np.argmax(psd)] == pytest.approx(0.1, abs=0.015)


def test_lagged_shifts_by_the_lag():
    """Source: closed form - a sinusoid delayed by d equals sin(2πf(t - d))."""
    t = np.arange(2000) / 20.0
    x = np.sin(2 * np.pi * 0.1 * t)
    shifted = lagged(x, 2.5, 20.0)
    np.testing.assert_allclose(shifted[100:], np.sin(2 * np.pi * 0.1 * (t[100:] - 2.5)), atol=1e-3)
