"""Motion artefacts in flow series: detection against a robust running scale, and correction.

Detection looks for sudden jumps: a sample is suspect when its first difference
(of log flow, so the test is scale free) departs from the running median by more
than ``threshold`` robust standard deviations, the scale being the running median
absolute deviation (MAD × 1.4826) of the differences in a window of
``window_s``.  The cardiac pulse, present in every DCS flow series, raises the
running scale along with everything else and so is not flagged.  Suspect samples
are padded and merged into segments.

Correction methods (all keep the segments in a mask for the GLM's robust weights):

``"mark"``
    Leave the flow as it is; only the mask is returned.
``"baseline"``
    Piecewise baseline correction: everything after a segment is rescaled so that
    its level continues the level before the segment, and the segment itself is
    replaced by that level.
``"spline"``
    Spline interpolation (Scholkmann et al. 2010, Physiol Meas 31:649, method as
    recalled from memory): inside each segment a smoothing spline fitted to the
    segment is subtracted (keeping the fast physiology), the segment is moved to the
    level before it, and the rest of the series follows.
"""

from __future__ import annotations

import numpy as np
from scipy import interpolate, ndimage

__all__ = ["MOTION_METHODS", "detect_motion", "correct_motion", "mask_segments"]

#: Correction methods accepted by :func:`correct_motion`.
MOTION_METHODS: tuple[str, ...] = ("mark", "baseline", "spline")

_MAD_TO_SD = 1.4826  # MAD of a normal sample times this = its standard deviation


def _running_median(x: np.ndarray, size: int) -> np.ndarray:
    return ndimage.median_filter(x, size=size, mode="mirror")


def detect_motion(
    flow,
    sfreq_hz: float,
    *,
    threshold: float = 6.0,
    window_s: float = 30.0,
    pad_s: float = 0.5,
    merge_s: float = 1.0,
) -> np.ndarray:
    """Mask of samples inside motion artefacts, per channel.

    Parameters
    ----------
    flow : ndarray, shape (n_times,) or (n_times, n_channels)
        Flow (BFi in cm²/s or relative); NaN samples are skipped.
    sfreq_hz : float
        Sampling rate in Hz.
    threshold : float, default=6.0
        Jump size, in robust standard deviations of the first differences, that marks
        a sample (ours; 5-8 is common practice for spike detectors).
    window_s : float, default=30.0
        Length of the running window for the robust scale, in s.
    pad_s : float, default=0.5
        Marked samples are widened by this much on each side, in s.
    merge_s : float, default=1.0
        Segments closer than this are merged, in s.

    Returns
    -------
    ndarray of bool, same shape as ``flow``
        True inside a motion segment.

    Notes
    -----
    d_t = log f_t - log f_{t-1}; m_t = running median of d; s_t = 1.4826 · running
    median of |d - m|; marked where |d_t - m_t| > threshold · s_t.
    """
    values = np.asarray(flow, dtype=float)
    one_d = values.ndim == 1
    values = values[:, None] if one_d else values
    n_times = values.shape[0]
    size = max(int(round(window_s * sfreq_hz)) | 1, 3)
    pad = int(round(pad_s * sfreq_hz))
    merge = int(round(merge_s * sfreq_hz))
    out = np.zeros(values.shape, dtype=bool)
    for c in range(values.shape[1]):
        x = values[:, c]
        ok = np.isfinite(x) & (x > 0)
        if ok.sum() < 10:
            continue
        positions = np.flatnonzero(ok)
        d = np.diff(np.log(x[positions]))
        centre = _running_median(d, size)
        dev = np.abs(d - centre)
        scale = _MAD_TO_SD * _running_median(dev, size)
        floor = _MAD_TO_SD * np.median(dev)
        scale = np.maximum(scale, 1e-3 * floor if floor > 0 else 1e-12)
        jumps = dev > threshold * scale
        hit = np.zeros(n_times, dtype=bool)
        hit[positions[1:][jumps]] = True
        hit[positions[:-1][jumps]] = True
        if pad:
            hit = ndimage.binary_dilation(hit, structure=np.ones(2 * pad + 1, bool))
        if merge:
            hit = _merge_close(hit, merge)
        out[:, c] = hit
    return out[:, 0] if one_d else out


def mask_segments(mask: np.ndarray, times_s: np.ndarray) -> list[list[float]]:
    """Runs of True in a 1-D mask as [start_s, stop_s] pairs (stop = last sample's time).

    Parameters
    ----------
    mask : ndarray of bool, shape (n_times,)
    times_s : ndarray, shape (n_times,)

    Returns
    -------
    list of [float, float]
    """
    mask = np.asarray(mask, dtype=bool)
    edges = np.diff(np.concatenate([[0], mask.astype(np.int8), [0]]))
    starts = np.flatnonzero(edges == 1)
    stops = np.flatnonzero(edges == -1) - 1
    return [[float(times_s[a]), float(times_s[b])] for a, b in zip(starts, stops, strict=True)]


def _merge_close(mask, gap):
    """Fill gaps of at most ``gap`` samples between runs of True."""
    out = mask.copy()
    runs = _runs(mask)
    for (_, stop), (start, _) in zip(runs[:-1], runs[1:], strict=True):
        if start - stop <= gap:
            out[stop:start] = True
    return out


def _runs(mask):
    edges = np.diff(np.concatenate([[0], mask.astype(np.int8), [0]]))
    return list(zip(np.flatnonzero(edges == 1), np.flatnonzero(edges == -1), strict=True))


def correct_motion(
    flow,
    mask,
    sfreq_hz: float,
    *,
    method: str = "baseline",
    level_s: float = 5.0,
    smoothing_s: float = 1.0,
) -> np.ndarray:
    """Flow with motion segments corrected (a new array; the input is left alone).

    Parameters
    ----------
    flow : ndarray, shape (n_times,) or (n_times, n_channels)
        Flow (positive values: BFi in cm²/s or relative flow).
    mask : ndarray of bool, same shape as ``flow``
        Motion segments (from :func:`detect_motion`).
    sfreq_hz : float
        Sampling rate in Hz.
    method : {"mark", "baseline", "spline"}, default="baseline"
        See the module notes.
    level_s : float, default=5.0
        Window, in s, over which the level (median) before and after a segment is taken.
    smoothing_s : float, default=1.0
        For ``"spline"``: the time scale, in s, of the smoothing spline (its
        penalty is set so that features slower than about this are removed).

    Returns
    -------
    ndarray, same shape as ``flow``

    Notes
    -----
    Levels are matched multiplicatively (flow is positive and motion changes it by a
    factor), i.e. additively in log flow.
    """
    if method not in MOTION_METHODS:
        raise ValueError(f"method must be one of {MOTION_METHODS}, got {method!r}")
    values = np.array(flow, dtype=float, copy=True)
    if method == "mark":
        return values
    one_d = values.ndim == 1
    values = values[:, None] if one_d else values
    mask2 = np.asarray(mask, dtype=bool).reshape(values.shape)
    n_level = max(int(round(level_s * sfreq_hz)), 1)
    for c in range(values.shape[1]):
        x = values[:, c]
        for start, stop in _runs(mask2[:, c]):
            before = x[max(start - n_level, 0) : start]
            before = before[np.isfinite(before)]
            after_idx = slice(stop, min(stop + n_level, x.size))
            after = x[after_idx][np.isfinite(x[after_idx])]
            if before.size == 0 or after.size == 0:
                continue  # artefact at an edge: leave it, it stays masked
            level_before = np.median(before)
            level_after = np.median(after)
            if not (level_before > 0 and level_after > 0):
                continue
            # rest of the series continues the level before the segment
            x[stop:] *= level_before / level_after
            if method == "baseline":
                x[start:stop] = level_before
            else:
                x[start:stop] = _spline_detrend(x[start:stop], sfreq_hz, smoothing_s) * level_before
        values[:, c] = x
    return values[:, 0] if one_d else values


def _spline_detrend(segment, sfreq_hz, smoothing_s):
    """Segment divided by a smoothing spline of itself (fast physiology kept, level 1)."""
    finite = np.isfinite(segment) & (segment > 0)
    if finite.sum() < 5:
        return np.ones_like(segment)
    t = np.arange(segment.size) / sfreq_hz
    log_x = np.log(segment[finite])
    # penalty lam ~ (time scale / 2π)^4 removes components slower than ~smoothing_s
    lam = (smoothing_s / (2.0 * np.pi)) ** 4
    spline = interpolate.make_smoothing_spline(t[finite], log_x, lam=lam)
    out = np.ones_like(segment)
    out[finite] = np.exp(log_x - spline(t[finite]))
    return out
