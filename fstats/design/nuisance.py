"""Nuisance regressors: short-separation channels, auxiliary signals, motion."""

from __future__ import annotations

import numpy as np

__all__ = ["standardise", "lagged", "spike_indicators", "accelerometer_magnitude"]


def standardise(values: np.ndarray, *, zscore: bool = True) -> np.ndarray:
    """Centre (and optionally scale to unit sd) a signal; missing samples become 0.

    Parameters
    ----------
    values : ndarray, shape (n_times,)
        Signal in any unit; NaN marks missing samples.
    zscore : bool, default=True
        Divide by the standard deviation after centring.

    Returns
    -------
    ndarray, shape (n_times,)
        (x - mean) / sd over the finite samples; NaNs replaced by 0 (the mean), so
        a gap carries no nuisance signal.  A constant signal gives all zeros.
    """
    x = np.asarray(values, dtype=float)
    finite = np.isfinite(x)
    out = np.zeros_like(x)
    if not finite.any():
        return out
    centred = x[finite] - x[finite].mean()
    if zscore:
        sd = centred.std()
        centred = centred / sd if sd > 0 else np.zeros_like(centred)
    out[finite] = centred
    return out


def lagged(values: np.ndarray, times_s: np.ndarray, lag_s: float) -> np.ndarray:
    """A signal delayed by ``lag_s`` seconds (linear interpolation), 0 outside.

    Parameters
    ----------
    values : ndarray, shape (n_times,)
        Signal, centred (so 0 is its mean).
    times_s : ndarray, shape (n_times,)
        Sample times (s).
    lag_s : float
        Delay (s); positive shifts the signal later: y(t) = x(t - lag_s).

    Returns
    -------
    ndarray, shape (n_times,)
    """
    t = np.asarray(times_s, dtype=float)
    return np.interp(t - lag_s, t, np.asarray(values, dtype=float), left=0.0, right=0.0)


def accelerometer_magnitude(axes: np.ndarray) -> np.ndarray:
    """Euclidean norm of accelerometer axes, shape (n_times, n_axes) -> (n_times,)."""
    return np.sqrt(np.nansum(np.asarray(axes, dtype=float) ** 2, axis=1))


def spike_indicators(values: np.ndarray, *, threshold_z: float, max_spikes: int) -> np.ndarray:
    """One indicator column per motion spike found in a signal.

    Parameters
    ----------
    values : ndarray, shape (n_times,)
        Signal whose jumps mark motion (flow of a channel, accelerometer magnitude).
    threshold_z : float
        A sample is a spike when its first difference exceeds ``threshold_z``
        robust standard deviations (median absolute deviation / 0.6745).
    max_spikes : int
        Keep at most this many (the largest) spikes.

    Returns
    -------
    ndarray, shape (n_times, n_spikes)
        Column j is 1 at spike sample j and 0 elsewhere (the sample is then
        effectively left out of the fit).
    """
    x = np.asarray(values, dtype=float)
    x = np.where(np.isfinite(x), x, np.nanmedian(x))
    diff = np.abs(np.diff(x, prepend=x[0]))
    mad = np.median(np.abs(diff - np.median(diff))) / 0.6745
    if mad <= 0:
        return np.zeros((x.size, 0))
    z = (diff - np.median(diff)) / mad
    candidates = np.flatnonzero(z > threshold_z)
    if candidates.size > max_spikes:
        candidates = np.sort(candidates[np.argsort(z[candidates])[::-1][:max_spikes]])
    out = np.zeros((x.size, candidates.size))
    out[candidates, np.arange(candidates.size)] = 1.0
    return out
