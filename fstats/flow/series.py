"""Flow-series operations after fitting: gap filling, relative flow, low-pass, resampling.

Pure functions on arrays of shape (n_times,) or (n_times, n_channels); NaN marks
missing samples throughout.  Filtering is zero-phase (``scipy.signal.sosfiltfilt``)
with a Butterworth design in second-order sections, so the response at the cutoff
is -6.02 dB (the squared -3.01 dB of one pass).
"""

from __future__ import annotations

from fractions import Fraction

import numpy as np
from scipy import signal

__all__ = ["fill_short_gaps", "relative_flow_values", "lowpass", "resample"]


def _as_2d(values):
    values = np.asarray(values, dtype=float)
    return (values[:, None], True) if values.ndim == 1 else (values, False)


def fill_short_gaps(flow, sfreq_hz: float, *, max_gap_s: float = 0.5):
    """Interpolate interior NaN runs no longer than ``max_gap_s``; leave longer ones.

    Parameters
    ----------
    flow : ndarray, shape (n_times,) or (n_times, n_channels)
    sfreq_hz : float
        Sampling rate in Hz.
    max_gap_s : float, default=0.5
        Longest run of missing samples (s) filled by linear interpolation.

    Returns
    -------
    filled : ndarray, same shape as ``flow``
        A copy with the short interior runs interpolated.
    filled_mask : ndarray of bool, same shape
        True where a value was interpolated.
    """
    values, one_d = _as_2d(flow)
    values = values.copy()
    filled = np.zeros(values.shape, dtype=bool)
    max_len = int(np.floor(max_gap_s * sfreq_hz + 1e-9))
    idx = np.arange(values.shape[0])
    for c in range(values.shape[1]):
        x = values[:, c]
        bad = ~np.isfinite(x)
        if not bad.any() or bad.all():
            continue
        edges = np.diff(np.concatenate([[0], bad.astype(np.int8), [0]]))
        for start, stop in zip(
            np.flatnonzero(edges == 1), np.flatnonzero(edges == -1), strict=True
        ):
            if start == 0 or stop == x.size or stop - start > max_len:
                continue
            x[start:stop] = np.interp(idx[start:stop], [start - 1, stop], [x[start - 1], x[stop]])
            filled[start:stop, c] = True
    return (values[:, 0], filled[:, 0]) if one_d else (values, filled)


def relative_flow_values(flow, times_s, baseline_window_s, *, exclude=None):
    """Flow relative to its mean over a baseline window (rBF, unitless, baseline = 1).

    Parameters
    ----------
    flow : ndarray, shape (n_times,) or (n_times, n_channels)
        BFi in cm²/s (NaN = missing).
    times_s : ndarray, shape (n_times,)
    baseline_window_s : (float, float)
        Start and stop of the baseline, in s on the recording's time base.
    exclude : ndarray of bool, same shape as ``flow``, optional
        Samples left out of the baseline mean (motion, bad curves).

    Returns
    -------
    relative : ndarray, same shape as ``flow``
    baseline : ndarray, shape (n_channels,) (or a float for 1-D input)
        The baseline mean in the input's unit; NaN where the window held no usable
        sample (then that channel's relative flow is NaN).
    """
    values, one_d = _as_2d(flow)
    times = np.asarray(times_s, dtype=float)
    start, stop = baseline_window_s
    if not stop > start:
        raise ValueError(f"baseline window must have stop > start, got {baseline_window_s}")
    in_window = (times >= start) & (times <= stop)
    use = in_window[:, None] & np.isfinite(values)
    if exclude is not None:
        use &= ~np.asarray(exclude, dtype=bool).reshape(values.shape)
    with np.errstate(invalid="ignore", divide="ignore"):
        baseline = np.where(use, values, 0.0).sum(axis=0) / use.sum(axis=0)
        relative = values / baseline
    return (relative[:, 0], float(baseline[0])) if one_d else (relative, baseline)


def _fill_for_filter(values):
    """Linear interpolation over NaN (edge NaN held at the nearest value) and the NaN mask."""
    out = values.copy()
    missing = ~np.isfinite(out)
    idx = np.arange(out.shape[0])
    for c in range(out.shape[1]):
        bad = missing[:, c]
        if bad.all():
            continue
        if bad.any():
            out[bad, c] = np.interp(idx[bad], idx[~bad], out[~bad, c])
    return out, missing


def lowpass(flow, sfreq_hz: float, cutoff_hz: float, *, order: int = 4):
    """Zero-phase Butterworth low-pass of a flow series (same unit as the input).

    Parameters
    ----------
    flow : ndarray, shape (n_times,) or (n_times, n_channels)
    sfreq_hz : float
        Sampling rate in Hz.
    cutoff_hz : float
        -3.01 dB frequency of one pass (the zero-phase result is -6.02 dB there), Hz.
    order : int, default=4

    Returns
    -------
    ndarray, same shape as ``flow``
        NaN samples are bridged by linear interpolation for filtering and set back to
        NaN afterwards.

    Notes
    -----
    ``scipy.signal.butter(order, cutoff_hz, "lowpass", fs=sfreq_hz, output="sos")``
    applied with ``scipy.signal.sosfiltfilt`` along time.
    """
    if not 0 < cutoff_hz < sfreq_hz / 2:
        raise ValueError(f"cutoff {cutoff_hz} Hz must lie in (0, {sfreq_hz / 2}) Hz")
    values, one_d = _as_2d(flow)
    sos = signal.butter(order, cutoff_hz, "lowpass", fs=sfreq_hz, output="sos")
    filled, missing = _fill_for_filter(values)
    out = signal.sosfiltfilt(sos, filled, axis=0)
    out[missing] = np.nan
    return out[:, 0] if one_d else out


def resample(times_s, flow, new_sfreq_hz: float, *, max_denominator: int = 1000):
    """Flow on a new regular time base, anti-aliased by polyphase filtering.

    Parameters
    ----------
    times_s : ndarray, shape (n_times,)
        Regular sample times in s.
    flow : ndarray, shape (n_times,) or (n_times, n_channels)
    new_sfreq_hz : float
        Target sampling rate in Hz.
    max_denominator : int, default=1000
        Limit of the rational approximation of the rate ratio.

    Returns
    -------
    new_times_s : ndarray, shape (n_new,)
        Starting at ``times_s[0]``, step 1/new rate (exact for the rational ratio).
    new_flow : ndarray, shape (n_new,) or (n_new, n_channels)
        ``scipy.signal.resample_poly`` output; samples nearest to input NaN are NaN.
    """
    times = np.asarray(times_s, dtype=float)
    values, one_d = _as_2d(flow)
    sfreq = 1.0 / float(np.median(np.diff(times)))
    ratio = Fraction(new_sfreq_hz / sfreq).limit_denominator(max_denominator)
    up, down = ratio.numerator, ratio.denominator
    filled, missing = _fill_for_filter(values)
    out = signal.resample_poly(filled, up, down, axis=0, padtype="line")
    new_times = times[0] + np.arange(out.shape[0]) * down / (up * sfreq)
    nearest = np.clip(np.round((new_times - times[0]) * sfreq).astype(int), 0, times.size - 1)
    out[missing[nearest]] = np.nan
    return new_times, (out[:, 0] if one_d else out)
