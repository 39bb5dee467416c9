"""Systemic physiology of the simulation: heart beats, pulse waveforms, respiration.

Heart beats come at intervals that vary from beat to beat (heart-rate
variability): a respiratory sinus arrhythmia term, a slow wandering of the mean
rate, coupling to the ~0.1 Hz Mayer rhythm and a small white jitter.  Each beat
launches a pulse of flow shaped like a blood-flow pulse: a skewed systolic peak
(fast rise, slower fall), a dicrotic notch and a smaller diastolic wave.  The
systolic part keeps roughly the same duration whatever the heart rate while the
diastolic part stretches with the beat interval (common practice; recalled from
memory).  A pulse-oximeter (PPG) trace uses the same beat times, a pulse-transit
delay and a smoother, volume-like waveform.
"""

from __future__ import annotations

import numpy as np

from fstats.simulate.fluctuations import power_law_noise

__all__ = [
    "beat_times",
    "pulse_waveform",
    "pulse_train",
    "respiration",
    "drift",
]


def beat_times(
    duration_s: float,
    heart_rate_bpm: float,
    rng: np.random.Generator,
    *,
    resp_phase=None,
    mayer=None,
    rsa_fraction: float = 0.04,
    jitter_fraction: float = 0.02,
    wander_fraction: float = 0.03,
    mayer_fraction: float = 0.015,
    rate_change=None,
) -> np.ndarray:
    """Heart-beat times with beat-to-beat variability, in seconds.

    Parameters
    ----------
    duration_s : float
        Beats are produced from before 0 s (one beat) until past ``duration_s``.
    heart_rate_bpm : float
        Mean heart rate in beats per minute.
    rng : numpy.random.Generator
    resp_phase : callable, optional
        Respiratory phase (radians) as a function of time (s), for the respiratory
        sinus arrhythmia; no RSA when None.
    mayer : callable, optional
        Unit-variance Mayer-wave signal as a function of time (s).
    rsa_fraction, jitter_fraction, wander_fraction, mayer_fraction : float
        Relative size of the respiratory modulation (amplitude), the white jitter,
        the slow wandering (standard deviations) and the Mayer coupling of the
        beat interval.
    rate_change : callable, optional
        Relative heart-rate increase as a function of time (s), e.g. task-locked
        arousal (0.05 = 5 % faster); intervals shrink by the factor 1/(1 + change).

    Returns
    -------
    ndarray, shape (n_beats,)
        Increasing beat times; the first is <= 0 and the last >= ``duration_s``.

    Notes
    -----
    RR_k = RR0 · (1 + a_rsa sin φ_resp(t_k) + a_w w_k + a_m m(t_k) + a_j ε_k) / (1 + c(t_k)),
    with t_k the beat times themselves (a few fixed-point passes), w_k a slow 1/f² wander
    over beats, ε_k white and c the optional rate change.
    With the defaults the beat-interval standard deviation is about 4-5 % of RR0
    (≈ 35-45 ms at 70 bpm), in the range of resting adults (recalled from memory).
    """
    rr0 = 60.0 / heart_rate_bpm
    n_beats = int(np.ceil(duration_s / (rr0 * 0.7))) + 4
    start = -rng.uniform(0.0, rr0)
    random_part = jitter_fraction * rng.standard_normal(n_beats)
    random_part += wander_fraction * power_law_noise(
        n_beats, 1.0 / rr0, 2.0, rng, min_hz=0.005, max_hz=0.05
    )
    times = start + np.arange(n_beats + 1) * rr0
    for _ in range(5):  # fixed point: modulations evaluated at the beats they produce
        at = times[:-1]
        modulation = random_part.copy()
        if resp_phase is not None:
            modulation += rsa_fraction * np.sin(resp_phase(at))
        if mayer is not None:
            modulation += mayer_fraction * mayer(at)
        intervals = rr0 * np.clip(1.0 + modulation, 0.6, 1.6)
        if rate_change is not None:
            intervals = intervals / (1.0 + rate_change(at))
        times = start + np.concatenate([[0.0], np.cumsum(intervals)])
    if times[-1] < duration_s + rr0:  # rare: long intervals; finish at the mean rate
        extra = np.arange(1, int((duration_s + 2 * rr0 - times[-1]) / rr0) + 2) * rr0
        times = np.concatenate([times, times[-1] + extra])
    return times[: np.searchsorted(times, duration_s) + 2]


def pulse_waveform(since_beat_s, interval_s, *, kind: str = "flow") -> np.ndarray:
    """One beat's pulse as a function of time since the beat, peak about 1 (unitless).

    Parameters
    ----------
    since_beat_s : ndarray
        Time since the beat onset in seconds (>= 0).
    interval_s : ndarray or float
        The beat interval (s), broadcast against ``since_beat_s``.
    kind : {"flow", "ppg"}, default="flow"
        ``"flow"``: sharp systolic flow peak (~0.1 s + 0.1·RR after onset), a notch and
        a dicrotic wave; ``"ppg"``: the smoother blood-volume pulse of a pulse oximeter.

    Returns
    -------
    ndarray
        Waveform values; 0 at onset, decaying towards 0 within about one interval.

    Notes
    -----
    Systolic peak: s(τ) = (τ/τp)^k exp(k (1 - τ/τp)), a gamma-shaped pulse with its
    maximum 1 at τp.  Dicrotic wave: a Gaussian of height h_d at τ_d.  The sum shows a
    notch between the two.  Shapes are ours (recalled from memory of typical pulses).
    """
    tau = np.maximum(np.asarray(since_beat_s, dtype=float), 0.0)
    interval = np.asarray(interval_s, dtype=float)
    if kind == "flow":
        tau_peak, shape, dicrotic_height, dicrotic_width = 0.08 + 0.10 * interval, 3.0, 0.45, 0.05
        tau_dicrotic = 0.30 + 0.12 * interval
    elif kind == "ppg":
        tau_peak, shape, dicrotic_height, dicrotic_width = 0.15 + 0.12 * interval, 2.2, 0.25, 0.08
        tau_dicrotic = 0.38 + 0.12 * interval
    else:
        raise ValueError(f"kind must be 'flow' or 'ppg', got {kind!r}")
    ratio = tau / tau_peak
    systolic = ratio**shape * np.exp(shape * (1.0 - ratio))
    dicrotic = dicrotic_height * np.exp(-0.5 * ((tau - tau_dicrotic) / dicrotic_width) ** 2)
    return systolic + dicrotic * (tau > 0)


def pulse_train(
    times_s: np.ndarray,
    beats_s: np.ndarray,
    rng: np.random.Generator,
    *,
    kind: str = "flow",
    amplitude_cv: float = 0.08,
    amplitude_modulation=None,
) -> np.ndarray:
    """The pulse waveform repeated at every beat, with beat-to-beat amplitude changes.

    Parameters
    ----------
    times_s : ndarray, shape (n_times,)
        Sample times in seconds, within ``beats_s[0]`` .. ``beats_s[-1]``.
    beats_s : ndarray, shape (n_beats,)
        Beat times in seconds (from :func:`beat_times`).
    rng : numpy.random.Generator
    kind : {"flow", "ppg"}, default="flow"
    amplitude_cv : float, default=0.08
        Coefficient of variation of the beat amplitude (white, beat to beat).
    amplitude_modulation : ndarray, shape (n_beats,), optional
        Extra relative amplitude change per beat (e.g. respiratory), added to 1.

    Returns
    -------
    ndarray, shape (n_times,)
        Sum of the current and the previous beat's pulse at each sample (a pulse's
        tail can reach into the next beat); zero-mean over the record.
    """
    beats_s = np.asarray(beats_s, dtype=float)
    gains = 1.0 + amplitude_cv * rng.standard_normal(beats_s.size)
    if amplitude_modulation is not None:
        gains = gains + amplitude_modulation
    intervals = np.diff(beats_s, append=beats_s[-1] + (beats_s[-1] - beats_s[-2]))
    current = np.clip(np.searchsorted(beats_s, times_s, side="right") - 1, 0, beats_s.size - 1)
    total = np.zeros(times_s.size)
    for back in (0, 1, 2):
        k = current - back
        valid = k >= 0
        k = np.maximum(k, 0)
        wave = pulse_waveform(times_s - beats_s[k], intervals[k], kind=kind)
        total += np.where(valid, gains[k] * wave, 0.0)
    return total - total.mean()


def respiration(
    times_s: np.ndarray, rate_hz: float, rng: np.random.Generator, *, rate_cv: float = 0.08
) -> tuple[np.ndarray, np.ndarray]:
    """A breathing signal with a wandering rate and depth (unitless, unit variance expected).

    Parameters
    ----------
    times_s : ndarray, shape (n_times,)
        Evenly spaced sample times in seconds.
    rate_hz : float
        Mean breathing rate in Hz (adults at rest 0.15-0.35 Hz, common practice).
    rng : numpy.random.Generator
    rate_cv : float, default=0.08
        Relative standard deviation of the slowly wandering instantaneous rate.

    Returns
    -------
    signal : ndarray, shape (n_times,)
        sin φ + 0.25 sin(2φ + 0.6), scaled by a slowly varying depth, zero mean,
        standard deviation 1: slightly asymmetric breaths.
    phase : ndarray, shape (n_times,)
        Respiratory phase φ(t) in radians (unwrapped).
    """
    n = times_s.size
    sfreq = 1.0 / (times_s[1] - times_s[0])
    # breath-to-breath changes over tens of seconds; the mean over minutes stays near rate_hz
    wander = power_law_noise(n, sfreq, 1.0, rng, min_hz=0.02, max_hz=0.1)
    rate = rate_hz * np.clip(1.0 + rate_cv * wander, 0.5, 1.5)
    phase = rng.uniform(0, 2 * np.pi) + 2.0 * np.pi * np.cumsum(rate) / sfreq
    depth = np.clip(
        1.0 + 0.2 * power_law_noise(n, sfreq, 2.0, rng, min_hz=0.003, max_hz=0.03), 0.3, None
    )
    signal = depth * (np.sin(phase) + 0.25 * np.sin(2.0 * phase + 0.6))
    signal = signal - signal.mean()
    return signal / signal.std(), phase


def drift(times_s: np.ndarray, rng: np.random.Generator) -> np.ndarray:
    """Slow drift: a linear trend plus one slow sinusoid (period 300-1200 s), unitless.

    Parameters
    ----------
    times_s : ndarray, shape (n_times,)
        Sample times in seconds.
    rng : numpy.random.Generator

    Returns
    -------
    ndarray, shape (n_times,)
        g·(t/T - 1/2) + 0.5 sin(2πt/P + φ), g standard normal, T the record length;
        multiplied by a drift amplitude (fraction of baseline) by the caller.
    """
    span = max(times_s[-1] - times_s[0], 1.0)
    x = (times_s - times_s[0]) / span - 0.5
    period = rng.uniform(300.0, 1200.0)
    wave = np.sin(2 * np.pi * times_s / period + rng.uniform(0, 2 * np.pi))
    return rng.standard_normal() * x + 0.5 * wave
