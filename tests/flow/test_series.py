"""Tests of fstats/flow/series.py: gap filling, relative flow, low-pass, resampling."""

import numpy as np
import pytest
from numpy.testing import assert_allclose
from scipy import signal

from fstats.flow.series import fill_short_gaps, lowpass, relative_flow_values, resample


def test_short_gaps_interpolated_long_gaps_kept():
    """Source: common practice - linear interpolation across short interior gaps only."""
    x = np.arange(40, dtype=float)
    x[5:7] = np.nan  # 2 samples = 0.1 s at 20 Hz
    x[20:35] = np.nan  # 0.75 s
    x[0] = np.nan  # leading edge: never extrapolated
    filled, where = fill_short_gaps(x, 20.0, max_gap_s=0.5)
    assert_allclose(filled[5:7], [5.0, 6.0])
    assert np.all(np.isnan(filled[20:35])) and np.isnan(filled[0])
    assert where.sum() == 2 and where[5] and where[6]


def test_relative_flow_baseline_mean_is_one():
    """Source: common practice - rBF = flow / mean flow over the baseline window."""
    t = np.arange(0, 100, 0.05)
    flow = np.column_stack([np.full(t.size, 2e-8), np.where(t < 20, 1e-8, 1.5e-8)])
    exclude = np.zeros(flow.shape, bool)
    exclude[10:20, 1] = True
    flow[10:20, 1] = 9e-8  # an artefact inside the baseline, excluded
    rel, baseline = relative_flow_values(flow, t, (0.0, 19.9), exclude=exclude)
    assert_allclose(baseline, [2e-8, 1e-8])
    assert_allclose(
        rel[t > 30], np.column_stack([np.ones((t > 30).sum()), np.full((t > 30).sum(), 1.5)])
    )


def test_lowpass_matches_scipy_sos_filtfilt():
    """Source: REFERENCE-CHECKS 7.2 - fstats filters equal scipy butter(sos) + sosfiltfilt
    (allclose 1e-10), and the zero-phase gain at the cutoff is 0.5 (-6.02 dB)."""
    fs, fc = 20.0, 2.0
    rng = np.random.default_rng(0)
    x = rng.standard_normal((4000, 2))
    sos = signal.butter(4, fc, "lowpass", fs=fs, output="sos")
    assert_allclose(lowpass(x, fs, fc), signal.sosfiltfilt(sos, x, axis=0), rtol=1e-10, atol=1e-12)
    t = np.arange(0, 400, 1 / fs)
    tone = np.sin(2 * np.pi * fc * t)
    out = lowpass(tone, fs, fc)
    middle = slice(2000, -2000)
    assert np.sqrt(2 * np.mean(out[middle] ** 2)) == pytest.approx(0.5, abs=2e-3)


def test_lowpass_bridges_and_restores_nan():
    """Source: common practice - NaN samples stay NaN and do not spread through the filter."""
    x = np.sin(np.linspace(0, 20, 1000))
    x[400:405] = np.nan
    out = lowpass(x, 20.0, 3.0)
    assert np.all(np.isnan(out[400:405])) and np.isfinite(out[:400]).all()
    assert np.isfinite(out[405:]).all()


def test_resample_matches_resample_poly_and_time_base():
    """Source: scipy.signal.resample_poly (polyphase, anti-aliased) - 20 Hz -> 10 Hz."""
    rng = np.random.default_rng(1)
    t = np.arange(0, 60, 0.05)
    x = rng.standard_normal(t.size)
    new_t, y = resample(t, x, 10.0)
    assert_allclose(y, signal.resample_poly(x, 1, 2, padtype="line"), rtol=1e-12)
    assert_allclose(np.diff(new_t), 0.1, rtol=1e-9)
    assert new_t[0] == 0.0 and y.size == 600


def test_resample_keeps_slow_signal():
    """Source: REFERENCE-CHECKS 7.1 - a 0.1 Hz component survives 20 Hz -> 5 Hz unchanged."""
    t = np.arange(0, 200, 0.05)
    x = np.sin(2 * np.pi * 0.1 * t)
    new_t, y = resample(t, x, 5.0)
    inner = (new_t > 10) & (new_t < 190)
    assert_allclose(y[inner], np.sin(2 * np.pi * 0.1 * new_t[inner]), atol=1e-3)
