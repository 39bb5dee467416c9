"""Heartbeats from the flow pulsatility (or a PPG signal) and RETROICOR cardiac terms.

DCS flow carries a clear cardiac pulse.  :func:`detect_heartbeats` finds the
dominant cardiac frequency in the spectrum, band-passes around it (zero-phase
Butterworth, second-order sections), and picks one peak per beat with a
refractory period tied to the dominant rate.  :func:`retroicor_terms` turns the
beat times into cardiac phase and its Fourier terms (Glover, Li & Ress 2000).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import signal

__all__ = [
    "CARDIAC_BAND_HZ",
    "PHYSIOLOGICAL_IBI_S",
    "Heartbeats",
    "detect_heartbeats",
    "cardiac_phase",
    "retroicor_terms",
]

#: Band (Hz) searched for the dominant cardiac peak: 36-180 bpm.
CARDIAC_BAND_HZ: tuple[float, float] = (0.6, 3.0)
#: Inter-beat intervals (s) counted as physiological: 40-180 bpm.
PHYSIOLOGICAL_IBI_S: tuple[float, float] = (60.0 / 180.0, 60.0 / 40.0)


@dataclass(frozen=True, eq=False)
class Heartbeats:
    """Detected heartbeats.

    Parameters
    ----------
    beat_times_s : ndarray, shape (n_beats,)
        Beat times (s), refined to sub-sample precision.
    heart_rate_bpm : float
        60 / median inter-beat interval, in beats per minute.
    dominant_hz : float
        Frequency (Hz) of the spectral peak the filter was centred on.
    beat_quality : float
        Fraction of inter-beat intervals that are physiological (40-180 bpm) and
        within 30 % of the median interval; 1 is a clean series.
    band_hz : tuple of float
        Pass band (Hz) used for detection.
    """

    beat_times_s: np.ndarray
    heart_rate_bpm: float
    dominant_hz: float
    beat_quality: float
    band_hz: tuple[float, float]

    @property
    def n_beats(self) -> int:
        """Number of detected beats."""
        return int(self.beat_times_s.size)


def _fill_nan(values: np.ndarray) -> np.ndarray:
    x = np.asarray(values, dtype=float)
    bad = ~np.isfinite(x)
    if not bad.any():
        return x
    if bad.all():
        return np.zeros_like(x)
    idx = np.arange(x.size)
    return np.interp(idx, idx[~bad], x[~bad])


def detect_heartbeats(values: np.ndarray, sfreq_hz: float, *, start_s: float = 0.0) -> Heartbeats:
    """Find heartbeats in a pulsatile signal (flow or PPG).

    Parameters
    ----------
    values : ndarray, shape (n_times,)
        The signal (any unit); NaNs are interpolated over.
    sfreq_hz : float
        Sampling rate (Hz); must exceed twice the upper band edge used.
    start_s : float, default=0
        Time (s) of the first sample.

    Returns
    -------
    Heartbeats
        Beat times, heart rate, quality and the band used.

    Raises
    ------
    ValueError
        If the sampling rate is too low for the cardiac band or the signal is too
        short (< 10 s).

    Notes
    -----
    1. Welch spectrum (16 s segments, no overlap) of the linearly detrended signal;
       the dominant peak f0 in 0.6-3 Hz (restricted to below 0.45 fs).
    2. Fourth-order Butterworth band-pass [max(0.5, 0.6 f0), min(1.6 f0 + 0.2, 3.5, 0.45 fs)] Hz
       applied forwards and backwards (``sosfiltfilt``): zero phase.
    3. ``find_peaks`` with a refractory distance of 0.7 / f0 s (a dicrotic wave
       cannot count as a beat; heart-rate variability stays well within 30 %) and a prominence of
       at least 0.5 sd of the filtered signal; each peak refined by a parabola
       through its three samples.
    """
    x = _fill_nan(values)
    n = x.size
    if n < 10 * sfreq_hz:
        raise ValueError("heartbeat detection needs at least 10 s of signal")
    nyquist = sfreq_hz / 2.0
    if nyquist * 0.9 < CARDIAC_BAND_HZ[0] * 2:
        raise ValueError(f"sampling rate {sfreq_hz:g} Hz is too low for cardiac detection")
    x = signal.detrend(x)
    nperseg = int(min(n, round(16 * sfreq_hz)))
    freqs, power = signal.welch(x, fs=sfreq_hz, nperseg=nperseg, noverlap=0, detrend="constant")
    in_band = (freqs >= CARDIAC_BAND_HZ[0]) & (freqs <= min(CARDIAC_BAND_HZ[1], 0.45 * sfreq_hz))
    f0 = float(freqs[in_band][np.argmax(power[in_band])])
    low = max(0.5, 0.6 * f0)
    high = min(1.6 * f0 + 0.2, 3.5, 0.45 * sfreq_hz)
    sos = signal.butter(4, [low, high], btype="bandpass", fs=sfreq_hz, output="sos")
    filtered = signal.sosfiltfilt(sos, x)
    distance = max(1, int(np.ceil(0.7 / f0 * sfreq_hz)))
    peaks, _ = signal.find_peaks(filtered, distance=distance, prominence=0.5 * np.std(filtered))
    # sub-sample refinement: vertex of the parabola through the peak and its neighbours
    inner = peaks[(peaks > 0) & (peaks < n - 1)]
    y0, y1, y2 = filtered[inner - 1], filtered[inner], filtered[inner + 1]
    denom = y0 - 2 * y1 + y2
    with np.errstate(divide="ignore", invalid="ignore"):
        shift = np.where(denom < 0, 0.5 * (y0 - y2) / denom, 0.0)
    beat_times = start_s + (inner + np.clip(shift, -0.5, 0.5)) / sfreq_hz
    ibi = np.diff(beat_times)
    if ibi.size:
        median_ibi = float(np.median(ibi))
        ok = (
            (ibi >= PHYSIOLOGICAL_IBI_S[0])
            & (ibi <= PHYSIOLOGICAL_IBI_S[1])
            & (np.abs(ibi - median_ibi) <= 0.3 * median_ibi)
        )
        quality = float(ok.mean())
        rate = 60.0 / median_ibi
    else:
        quality, rate = 0.0, float("nan")
    return Heartbeats(
        beat_times_s=beat_times,
        heart_rate_bpm=rate,
        dominant_hz=f0,
        beat_quality=quality,
        band_hz=(low, high),
    )


def cardiac_phase(times_s: np.ndarray, beat_times_s: np.ndarray) -> np.ndarray:
    """RETROICOR cardiac phase at given times.

    Parameters
    ----------
    times_s : ndarray, shape (n_times,)
        Times (s).
    beat_times_s : ndarray, shape (n_beats,)
        Increasing beat times (s).

    Returns
    -------
    ndarray, shape (n_times,)
        φ_c(t) = 2π (t - t_k) / (t_{k+1} - t_k) for t_k <= t < t_{k+1}, in [0, 2π);
        NaN before the first and from the last beat on.

    References
    ----------
    Glover GH, Li TQ, Ress D (2000) Image-based method for retrospective correction
    of physiological motion effects in fMRI: RETROICOR. Magn Reson Med 44(1):162-167.
    """
    t = np.asarray(times_s, dtype=float)
    beats = np.asarray(beat_times_s, dtype=float)
    phase = np.full(t.shape, np.nan)
    if beats.size < 2:
        return phase
    k = np.searchsorted(beats, t, side="right") - 1
    inside = (k >= 0) & (k < beats.size - 1)
    kk = k[inside]
    phase[inside] = 2 * np.pi * (t[inside] - beats[kk]) / (beats[kk + 1] - beats[kk])
    return phase


def retroicor_terms(times_s: np.ndarray, beat_times_s: np.ndarray, harmonics: int) -> np.ndarray:
    """RETROICOR Fourier terms of cardiac phase.

    Parameters
    ----------
    times_s : ndarray, shape (n_times,)
        Sample times (s).
    beat_times_s : ndarray, shape (n_beats,)
        Beat times (s).
    harmonics : int
        Number of harmonics M (>= 1).

    Returns
    -------
    ndarray, shape (n_times, 2 * harmonics)
        Columns cos(φ), sin(φ), cos(2φ), sin(2φ), ... .  Samples before the first
        or after the last beat have no phase; their terms are set to 0 (not NaN)
        so the GLM can still use every sample (those samples then carry no
        cardiac model, which is the least harmful choice).
    """
    phase = cardiac_phase(times_s, beat_times_s)
    valid = np.isfinite(phase)
    m = np.arange(1, harmonics + 1)[None, :]
    arg = np.where(valid, phase, 0.0)[:, None] * m
    out = np.empty((phase.size, 2 * harmonics))
    out[:, 0::2] = np.cos(arg)
    out[:, 1::2] = np.sin(arg)
    out[~valid] = 0.0
    return out
