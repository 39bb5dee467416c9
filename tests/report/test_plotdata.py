"""Plot helpers of the report against scipy, statsmodels and worked examples."""

import numpy as np
import pytest
from numpy.testing import assert_allclose
from scipy import signal, stats

from fstats.report.plotdata import (
    autocorrelation,
    envelope_decimate,
    epoch_average,
    flow_spectrum,
    ljung_box,
    low_weight_segments,
    spectral_peak_hz,
    task_spans,
    thin_curve,
    thin_rows,
)


def test_envelope_decimate_keeps_spikes_and_range():
    """Source: common practice - min/max binning keeps each bin's extremes, so a
    one-sample spike and the global range survive thinning."""
    rng = np.random.default_rng(0)
    times = np.arange(36000) / 20.0
    values = rng.standard_normal(times.size)
    values[12345] = 40.0
    values[20000] = -35.0
    t, v = envelope_decimate(times, values, 3000)
    assert v.size <= 3000
    assert np.nanmax(v) == 40.0 and np.nanmin(v) == -35.0
    assert t[np.nanargmax(v)] == times[12345]
    assert np.all(np.diff(t) >= 0)


def test_envelope_decimate_short_trace_unchanged_and_inputs_untouched():
    """Source: common practice - a trace shorter than the budget is returned as is."""
    times = np.arange(10.0)
    values = np.arange(10.0) ** 2
    before = values.copy()
    t, v = envelope_decimate(times, values, 3000)
    assert_allclose(v, values)
    assert v is not values
    assert_allclose(values, before)


def test_envelope_decimate_all_nan_bin_gives_nan():
    """Source: common practice - a bin with no finite sample draws a gap (NaN)."""
    values = np.ones(1000)
    values[:100] = np.nan
    _, v = envelope_decimate(np.arange(1000.0), values, 20)
    assert np.isnan(v[:2]).all() and np.isfinite(v[2:]).all()


def test_flow_spectrum_matches_scipy_welch_and_finds_cardiac_peak():
    """Source: scipy.signal.welch (same segment length) - identical PSD; the peak of a
    1.2 Hz sinusoid plus noise lies within one frequency bin of 1.2 Hz."""
    rng = np.random.default_rng(1)
    fs = 20.0
    t = np.arange(0, 600, 1 / fs)
    x = 1e-8 * (1 + 0.05 * np.sin(2 * np.pi * 1.2 * t) + 0.01 * rng.standard_normal(t.size))
    freqs, psd = flow_spectrum(x, fs, segment_s=60.0)
    ref_f, ref_p = signal.welch(x, fs=fs, nperseg=1200)
    assert_allclose(freqs, ref_f)
    assert_allclose(psd, ref_p, rtol=1e-12)
    assert abs(spectral_peak_hz(freqs, psd, (0.7, 3.0)) - 1.2) <= fs / 1200


def test_flow_spectrum_fills_nan_by_interpolation():
    """Source: common practice - a few missing samples are bridged linearly, leaving the
    spectral peak where it was."""
    fs = 20.0
    t = np.arange(0, 300, 1 / fs)
    x = np.sin(2 * np.pi * 0.25 * t)
    x[500:520] = np.nan
    freqs, psd = flow_spectrum(x, fs, segment_s=40.0)
    assert np.isfinite(psd).all()
    assert abs(spectral_peak_hz(freqs, psd, (0.1, 0.6)) - 0.25) <= fs / 800


def test_autocorrelation_matches_statsmodels_acf():
    """Source: statsmodels.tsa.stattools.acf (biased estimator, demeaned)."""
    from statsmodels.tsa.stattools import acf

    rng = np.random.default_rng(2)
    e = rng.standard_normal(3000)
    x = signal.lfilter([1.0], [1.0, -0.7], e)
    assert_allclose(autocorrelation(x, 40), acf(x, nlags=40, fft=False), atol=1e-12)


def test_ljung_box_matches_statsmodels():
    """Source: statsmodels.stats.diagnostic.acorr_ljungbox (Ljung & Box 1978)."""
    from statsmodels.stats.diagnostic import acorr_ljungbox

    rng = np.random.default_rng(3)
    x = signal.lfilter([1.0], [1.0, -0.2], rng.standard_normal(800))
    q, p = ljung_box(x, 10)
    ref = acorr_ljungbox(x, lags=[10])
    assert_allclose(q, ref["lb_stat"].iloc[0], rtol=1e-10)
    assert_allclose(p, ref["lb_pvalue"].iloc[0], rtol=1e-8)


def test_low_weight_segments_worked_example():
    """Source: worked by hand - weights below 0.5 at samples 3-5 and 8 give two spans."""
    times = np.arange(10) * 0.5
    weights = np.array([1, 1, 0.9, 0.2, 0.1, 0.3, 1, 1, 0.4, 1.0])
    assert low_weight_segments(times, weights, 0.5) == [(1.5, 2.5), (4.0, 4.0)]
    assert low_weight_segments(times, weights, 0.5, min_duration_s=0.5) == [(1.5, 2.5)]
    assert low_weight_segments(times, np.ones(10)) == []


def test_task_spans_groups_by_condition_in_order():
    """Source: worked by hand."""
    spans = task_spans([20.0, 60.0, 105.0], [40.0, 25.0, 40.0], ["b", "a", "b"])
    assert list(spans) == ["b", "a"]
    assert spans["b"] == [(20.0, 60.0), (105.0, 145.0)]


def test_thin_rows_and_curve_are_block_means():
    """Source: worked by hand - 10 rows thinned to 5 are the means of row pairs."""
    m = np.arange(20.0).reshape(10, 2)
    thinned, rows = thin_rows(m, 5)
    assert_allclose(thinned[:, 0], [1, 5, 9, 13, 17])
    assert_allclose(rows, [0, 2, 4, 6, 8])
    assert_allclose(thin_curve(np.arange(10.0), 5), [0.5, 2.5, 4.5, 6.5, 8.5])


def test_epoch_average_mean_and_band_match_scipy_t_interval():
    """Source: scipy.stats.t.interval - the band is the t interval of the epoch mean; the
    mean of a noiseless 10 % step is 10 % (closed form)."""
    fs = 10.0
    t = np.arange(0, 400, 1 / fs)
    onsets = np.array([50.0, 150.0, 250.0])
    rng = np.random.default_rng(4)
    flow = np.ones(t.size)
    gains = np.array([0.08, 0.10, 0.12])
    for onset, g in zip(onsets, gains, strict=True):
        flow[(t >= onset) & (t < onset + 30)] *= 1 + g
    avg = epoch_average(t, flow, onsets, window_s=(-5.0, 40.0))
    inside = (avg["time_s"] > 5) & (avg["time_s"] < 25)
    assert avg["n_epochs"] == 3
    assert_allclose(avg["mean"][inside], 10.0, rtol=1e-12)
    lo, hi = stats.t.interval(0.95, 2, loc=10.0, scale=np.std(100 * gains, ddof=1) / np.sqrt(3))
    assert_allclose(avg["ci_low"][inside], lo, rtol=1e-10)
    assert_allclose(avg["ci_high"][inside], hi, rtol=1e-10)
    flow2 = flow + 0.001 * rng.standard_normal(t.size)
    assert epoch_average(t, flow2, [1.0, 395.0], window_s=(-5, 40))["n_epochs"] == 0


@pytest.mark.parametrize("n", [1, 2])
def test_epoch_average_band_needs_two_epochs(n):
    """Source: common practice - a spread needs at least two epochs."""
    t = np.arange(0, 300, 0.1)
    avg = epoch_average(t, np.ones(t.size), [50.0, 150.0][:n], window_s=(-5, 30))
    assert np.isnan(avg["ci_low"]).all() == (n == 1)
