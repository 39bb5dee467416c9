"""Pure array helpers that turn results into what a figure shows.

Nothing here draws, reads files or logs.  The helpers thin long traces for
plotting without hiding spikes, estimate power spectra, find spectral peaks,
compute residual autocorrelation, find low-weight (motion) segments and, when a
fit carries no block averages of its own, average epochs around task onsets.
"""

from __future__ import annotations

import numpy as np
from scipy import signal, stats

__all__ = [
    "envelope_decimate",
    "thin_rows",
    "flow_spectrum",
    "spectral_peak_hz",
    "autocorrelation",
    "ljung_box",
    "thin_curve",
    "low_weight_segments",
    "task_spans",
    "epoch_average",
]


def envelope_decimate(
    times_s: np.ndarray, values: np.ndarray, max_points: int = 3000
) -> tuple[np.ndarray, np.ndarray]:
    """Thin a trace to at most ``max_points`` samples, keeping each bin's minimum and maximum.

    Parameters
    ----------
    times_s : ndarray, shape (n_times,)
        Sample times in seconds.
    values : ndarray, shape (n_times,)
        Trace values (any unit); NaN samples are ignored within a bin.
    max_points : int, default=3000
        Upper bound on the number of returned samples (even; two per bin).

    Returns
    -------
    times_s : ndarray, shape (n_out,)
    values : ndarray, shape (n_out,)
        For each bin, the minimum and the maximum in their time order, so a
        one-sample spike survives thinning.  Returned unchanged (as copies) when
        the trace is already short enough.

    Notes
    -----
    Min/max binning is common practice for plotting long signals: a line through
    the alternating extremes draws the same envelope as the full trace at screen
    resolution.
    """
    times_s = np.asarray(times_s, dtype=float)
    values = np.asarray(values, dtype=float)
    n = values.size
    if n <= max_points:
        return times_s.copy(), values.copy()
    n_bins = max(1, int(max_points) // 2)
    size = -(-n // n_bins)  # ceil: samples per bin
    n_bins = -(-n // size)
    pad = n_bins * size - n
    v = np.concatenate([values, np.full(pad, np.nan)]).reshape(n_bins, size)
    t = np.concatenate([times_s, np.full(pad, times_s[-1])]).reshape(n_bins, size)
    empty = np.isnan(v).all(axis=1)
    i_lo = np.where(np.isnan(v), np.inf, v).argmin(axis=1)
    i_hi = np.where(np.isnan(v), -np.inf, v).argmax(axis=1)
    first, second = np.minimum(i_lo, i_hi), np.maximum(i_lo, i_hi)
    rows = np.arange(n_bins)
    out_t = np.column_stack([t[rows, first], t[rows, second]]).ravel()
    out_v = np.column_stack([v[rows, first], v[rows, second]]).ravel()
    out_v[np.repeat(empty, 2)] = np.nan
    return out_t, out_v


def thin_rows(matrix: np.ndarray, max_rows: int = 800) -> tuple[np.ndarray, np.ndarray]:
    """Average consecutive rows of a matrix so it has at most ``max_rows`` rows.

    Parameters
    ----------
    matrix : ndarray, shape (n_times, n_columns)
    max_rows : int, default=800

    Returns
    -------
    thinned : ndarray, shape (n_out, n_columns)
        Block means of consecutive rows (unchanged copy when already short).
    row_index : ndarray, shape (n_out,)
        Index of the first original row of each block.
    """
    matrix = np.asarray(matrix, dtype=float)
    n = matrix.shape[0]
    if n <= max_rows:
        return matrix.copy(), np.arange(n)
    edges = np.linspace(0, n, max_rows + 1).astype(int)
    thinned = np.add.reduceat(matrix, edges[:-1], axis=0) / np.diff(edges)[:, None]
    return thinned, edges[:-1]


def flow_spectrum(
    values: np.ndarray, sfreq_hz: float, *, segment_s: float = 60.0
) -> tuple[np.ndarray, np.ndarray]:
    """Welch power spectral density of a flow trace, in unit² per Hz.

    Parameters
    ----------
    values : ndarray, shape (n_times,)
        Flow samples (cm²/s or relative).  NaN samples are filled by linear
        interpolation; the mean is removed (Welch's default constant detrend).
    sfreq_hz : float
        Sampling rate in Hz.
    segment_s : float, default=60.0
        Welch segment length in seconds (Hann window, 50 % overlap), which sets
        the frequency resolution to about ``1 / segment_s`` Hz.

    Returns
    -------
    freqs_hz : ndarray, shape (n_freqs,)
    psd : ndarray, shape (n_freqs,)
        One-sided power spectral density (``scipy.signal.welch``, density scaling).
    """
    x = np.asarray(values, dtype=float)
    bad = ~np.isfinite(x)
    if bad.all():
        return np.array([0.0]), np.array([np.nan])
    if bad.any():
        idx = np.arange(x.size)
        x = x.copy()
        x[bad] = np.interp(idx[bad], idx[~bad], x[~bad])
    nperseg = int(min(x.size, max(16, round(segment_s * sfreq_hz))))
    return signal.welch(x, fs=sfreq_hz, nperseg=nperseg)


def spectral_peak_hz(freqs_hz: np.ndarray, psd: np.ndarray, band_hz: tuple[float, float]) -> float:
    """Frequency (Hz) of the largest spectral value inside a band; NaN if the band is empty."""
    freqs_hz = np.asarray(freqs_hz, dtype=float)
    psd = np.asarray(psd, dtype=float)
    inside = (freqs_hz >= band_hz[0]) & (freqs_hz <= band_hz[1]) & np.isfinite(psd)
    if not inside.any():
        return float("nan")
    return float(freqs_hz[inside][np.argmax(psd[inside])])


def autocorrelation(x: np.ndarray, max_lag: int) -> np.ndarray:
    """Sample autocorrelation at lags 0..max_lag (biased estimator, NaNs dropped).

    Parameters
    ----------
    x : ndarray, shape (n_times,)
    max_lag : int
        Largest lag in samples.

    Returns
    -------
    ndarray, shape (max_lag + 1,)
        ``r_k = sum_t (x_t - m)(x_{t+k} - m) / sum_t (x_t - m)**2``, the estimator
        of Box & Jenkins (the default of ``statsmodels.tsa.stattools.acf``).
    """
    x = np.asarray(x, dtype=float)
    x = x[np.isfinite(x)]
    max_lag = int(min(max_lag, max(x.size - 1, 0)))
    d = x - x.mean()
    denom = float(d @ d)
    if denom == 0.0:
        out = np.zeros(max_lag + 1)
        out[0] = 1.0
        return out
    spec = np.fft.rfft(d, n=2 * x.size)
    full = np.fft.irfft(spec * np.conj(spec))[: max_lag + 1]
    return full / denom


def ljung_box(x: np.ndarray, n_lags: int) -> tuple[float, float]:
    """Ljung–Box portmanteau statistic and p-value for lags 1..n_lags.

    Parameters
    ----------
    x : ndarray, shape (n_times,)
        Residual series (NaNs dropped).
    n_lags : int
        Number of autocorrelation lags pooled (h).

    Returns
    -------
    q : float
        ``Q = n (n + 2) sum_{k=1}^{h} r_k**2 / (n - k)`` with ``r_k`` from
        :func:`autocorrelation`.
    p : float
        ``P(chi2_h > Q)``.

    Notes
    -----
    Ljung & Box (1978), Biometrika 65:297-303.  Computed with the FFT
    autocorrelation, so it stays fast for long recordings (the same statistic as
    ``statsmodels.stats.diagnostic.acorr_ljungbox`` without model degrees of freedom).
    """
    x = np.asarray(x, dtype=float)
    x = x[np.isfinite(x)]
    n = x.size
    h = int(n_lags)
    r = autocorrelation(x, h)[1 : h + 1]
    k = np.arange(1, r.size + 1)
    q = float(n * (n + 2) * np.sum(r**2 / (n - k)))
    return q, float(stats.chi2.sf(q, r.size))


def thin_curve(values: np.ndarray, max_points: int = 500) -> np.ndarray:
    """Block means of consecutive samples so a smooth curve has at most ``max_points`` points.

    Parameters
    ----------
    values : ndarray, shape (n,)
    max_points : int, default=500

    Returns
    -------
    ndarray, shape (min(n, max_points),)
        Unchanged copy when already short; otherwise means over near-equal blocks
        (NaNs ignored).  Apply to times and values alike.
    """
    values = np.asarray(values, dtype=float)
    if values.size <= max_points:
        return values.copy()
    edges = np.linspace(0, values.size, max_points + 1).astype(int)
    sums = np.add.reduceat(np.nan_to_num(values), edges[:-1])
    counts = np.add.reduceat(np.isfinite(values).astype(float), edges[:-1])
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(counts > 0, sums / counts, np.nan)


def low_weight_segments(
    times_s: np.ndarray, weights: np.ndarray, threshold: float = 0.5, min_duration_s: float = 0.0
) -> list[tuple[float, float]]:
    """Time spans (s) where robust weights fall below a threshold (likely motion).

    Parameters
    ----------
    times_s : ndarray, shape (n_times,)
    weights : ndarray, shape (n_times,)
        Robust weights in [0, 1] (1 = sample fully trusted).
    threshold : float, default=0.5
    min_duration_s : float, default=0.0
        Drop spans shorter than this.

    Returns
    -------
    list of (start_s, stop_s)
        ``stop_s`` is the time of the last low-weight sample of the span.
    """
    times_s = np.asarray(times_s, dtype=float)
    low = np.asarray(weights, dtype=float) < threshold
    if not low.any():
        return []
    change = np.diff(np.concatenate([[0], low.astype(int), [0]]))
    starts = np.flatnonzero(change == 1)
    stops = np.flatnonzero(change == -1) - 1
    spans = [(float(times_s[a]), float(times_s[b])) for a, b in zip(starts, stops, strict=False)]
    return [s for s in spans if s[1] - s[0] >= min_duration_s]


def task_spans(onsets_s, durations_s, conditions) -> dict[str, list[tuple[float, float]]]:
    """Task periods per condition, ``{condition: [(start_s, stop_s), ...]}``, first-seen order."""
    spans: dict[str, list[tuple[float, float]]] = {}
    for onset, duration, condition in zip(onsets_s, durations_s, conditions, strict=False):
        spans.setdefault(str(condition), []).append((float(onset), float(onset + duration)))
    return spans


def epoch_average(
    times_s: np.ndarray,
    flow: np.ndarray,
    onsets_s: np.ndarray,
    *,
    window_s: tuple[float, float],
    baseline_s: tuple[float, float] = (-5.0, 0.0),
    confidence: float = 0.95,
) -> dict[str, np.ndarray]:
    """Mean percent flow change around onsets, with a t-based confidence band across epochs.

    Parameters
    ----------
    times_s : ndarray, shape (n_times,)
        Sample times in seconds, evenly spaced.
    flow : ndarray, shape (n_times,)
        Flow of one channel (cm²/s or relative).
    onsets_s : ndarray, shape (n_epochs,)
        Onsets in seconds; epochs that do not fit inside the recording are dropped.
    window_s : (float, float)
        Epoch window relative to onset, in seconds (e.g. ``(-5, 60)``).
    baseline_s : (float, float), default=(-5, 0)
        Baseline window relative to onset; each epoch is expressed as
        ``100 * (flow / mean(flow in baseline) - 1)`` percent.
    confidence : float, default=0.95

    Returns
    -------
    dict
        ``time_s`` (n_lags,), ``mean``, ``ci_low``, ``ci_high`` (% change, n_lags),
        ``n_epochs`` (scalar array).  The band is ``mean ± t_{n-1} * sd / sqrt(n)``;
        NaN where fewer than two epochs exist.
    """
    times_s = np.asarray(times_s, dtype=float)
    flow = np.asarray(flow, dtype=float)
    dt = float(np.median(np.diff(times_s)))
    lag_start = int(np.round(window_s[0] / dt))
    lag_stop = int(np.round(window_s[1] / dt))
    lags = np.arange(lag_start, lag_stop + 1)
    b0, b1 = int(np.round(baseline_s[0] / dt)), int(np.round(baseline_s[1] / dt))
    epochs = []
    for onset in np.asarray(onsets_s, dtype=float):
        i0 = int(np.round((onset - times_s[0]) / dt))
        if i0 + lags[0] < 0 or i0 + lags[-1] >= times_s.size or i0 + b0 < 0:
            continue
        base = np.nanmean(flow[i0 + b0 : max(i0 + b1, i0 + b0 + 1)])
        if not np.isfinite(base) or base == 0:
            continue
        epochs.append(100.0 * (flow[i0 + lags] / base - 1.0))
    n = len(epochs)
    nan = np.full(lags.size, np.nan)
    if n == 0:
        return {"time_s": lags * dt, "mean": nan, "ci_low": nan, "ci_high": nan, "n_epochs": 0}
    arr = np.vstack(epochs)
    mean = np.nanmean(arr, axis=0)
    if n < 2:
        return {"time_s": lags * dt, "mean": mean, "ci_low": nan, "ci_high": nan, "n_epochs": 1}
    half = stats.t.ppf(0.5 + confidence / 2, n - 1) * np.nanstd(arr, axis=0, ddof=1) / np.sqrt(n)
    return {
        "time_s": lags * dt,
        "mean": mean,
        "ci_low": mean - half,
        "ci_high": mean + half,
        "n_epochs": n,
    }
