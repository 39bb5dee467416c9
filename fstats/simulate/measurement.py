"""The measurement side of the simulation: photon count rates, BFi noise, motion, accelerometer.

Noise model (photon-noise-like).  The relative noise of a BFi sample is taken as

    σ_rel(t) = σ_ref · (20 kcps / I(t))^γ · sqrt(f_s / 20 Hz),

with I(t) the detected count rate and f_s the sampling rate (integration time
1/f_s).  γ = 1 is the low-count regime of the DCS noise model (at ≲ 10⁵ counts/s
and microsecond bins each bin holds far fewer than one photon, so the g2 noise
goes as 1/(I·sqrt(T·t)); Zhou et al. 2006, Opt Express 14:1125, recalled from
memory).  σ_ref = 4 % per sample at 20 kcps and 20 Hz is our choice, of the order
seen in 3 cm adult-head DCS (recalled from memory).  Long channels, with their
lower count rates, are therefore noisier than the short one.

Motion artefacts are sparse (0-3 per recording) and hit every channel at once,
hardest in the scalp channel: brief *spikes* (mostly apparent flow increases,
since movement decorrelates the speckle) and *steps* (the probe shifts; the flow
level and the count rate change and the flow relaxes back over tens of seconds).
"""

from __future__ import annotations

import numpy as np

from fstats.simulate.fluctuations import power_law_noise

__all__ = [
    "REFERENCE_COUNT_RATE_HZ",
    "REFERENCE_SFREQ_HZ",
    "count_rates",
    "relative_noise_std",
    "draw_motion_events",
    "motion_factors",
    "accelerometer",
]

#: Count rate (counts/s) at which ``noise_pct`` is specified.
REFERENCE_COUNT_RATE_HZ: float = 20_000.0
#: Sampling rate (Hz) at which ``noise_pct`` is specified.
REFERENCE_SFREQ_HZ: float = 20.0


def count_rates(
    n_times: int,
    sfreq_hz: float,
    mean_hz: np.ndarray,
    rng: np.random.Generator,
    *,
    wander_cv: float = 0.03,
) -> np.ndarray:
    """Detected photon count rates with a slow wander, counts per second.

    Parameters
    ----------
    n_times : int
    sfreq_hz : float
        Sampling rate in Hz.
    mean_hz : ndarray, shape (n_channels,)
        Mean count rate per channel, counts/s.
    rng : numpy.random.Generator
    wander_cv : float, default=0.03
        Relative standard deviation of the slow (1/f², below ~0.05 Hz) wander.

    Returns
    -------
    ndarray, shape (n_times, n_channels)
    """
    mean_hz = np.asarray(mean_hz, dtype=float)
    wander = power_law_noise(
        n_times, sfreq_hz, 2.0, rng, min_hz=0.002, max_hz=0.05, n_series=mean_hz.size
    )
    return mean_hz * np.clip(1.0 + wander_cv * wander, 0.5, 1.5)


def relative_noise_std(
    count_rate_hz: np.ndarray, sfreq_hz: float, noise_pct: float, exponent: float = 1.0
) -> np.ndarray:
    """Relative standard deviation of BFi measurement noise per sample (unitless).

    Parameters
    ----------
    count_rate_hz : ndarray
        Detected count rate, counts/s.
    sfreq_hz : float
        Sampling rate in Hz (integration time 1/sfreq_hz per sample).
    noise_pct : float
        Noise in percent at 20 kcps and 20 Hz.
    exponent : float, default=1.0
        γ in (20 kcps / I)^γ.

    Returns
    -------
    ndarray, same shape as ``count_rate_hz``
    """
    ratio = REFERENCE_COUNT_RATE_HZ / np.asarray(count_rate_hz, dtype=float)
    return noise_pct / 100.0 * ratio**exponent * np.sqrt(sfreq_hz / REFERENCE_SFREQ_HZ)


def draw_motion_events(
    duration_s: float, max_events: int, rng: np.random.Generator, *, n_long: int = 2
) -> list[dict]:
    """Draw sparse motion artefacts for one recording.

    Parameters
    ----------
    duration_s : float
        Recording length in seconds; events fall within 10 s of neither end.
    max_events : int
        The number of events is drawn uniformly from 0..max_events.
    rng : numpy.random.Generator
    n_long : int, default=2
        Number of long channels (each gets its own share of the scalp artefact).

    Returns
    -------
    list of dict
        One dict per event, ordered by onset: ``onset_s``, ``duration_s``, ``kind``
        ("spike" or "step"), ``scalp_pct`` (peak change of scalp flow, percent),
        ``long_share`` (list, fraction of it seen by each long channel),
        ``step_pct`` and ``recovery_s`` (steps only; level change in percent and its
        relaxation time constant in s), ``count_rate_change`` (relative).
    """
    n_events = int(rng.integers(0, max_events + 1)) if max_events > 0 else 0
    if n_events == 0 or duration_s <= 30.0:
        return []
    onsets = np.sort(rng.uniform(10.0, duration_s - 10.0, n_events))
    events = []
    for onset in onsets:
        kind = "step" if rng.random() < 0.3 else "spike"
        if rng.random() < 0.75:
            scalp_pct = rng.uniform(30.0, 100.0)
        else:
            scalp_pct = -rng.uniform(20.0, 50.0)
        event = {
            "onset_s": float(onset),
            "duration_s": float(rng.uniform(0.5, 3.0)),
            "kind": kind,
            "scalp_pct": float(scalp_pct),
            "long_share": [float(v) for v in rng.uniform(0.3, 0.6, n_long)],
            "step_pct": 0.0,
            "recovery_s": 0.0,
            "count_rate_change": float(-rng.uniform(0.2, 0.6)),
        }
        if kind == "step":
            event["step_pct"] = float(rng.choice([-1.0, 1.0]) * rng.uniform(5.0, 15.0))
            event["recovery_s"] = float(rng.uniform(30.0, 200.0))
            event["count_rate_change"] = float(rng.uniform(-0.3, 0.2))
        events.append(event)
    return events


def motion_factors(
    times_s: np.ndarray, events: list[dict], shares: np.ndarray
) -> tuple[np.ndarray, np.ndarray]:
    """Multiplicative flow and count-rate factors of the motion artefacts.

    Parameters
    ----------
    times_s : ndarray, shape (n_times,)
        Sample times in seconds.
    events : list of dict
        From :func:`draw_motion_events`.
    shares : ndarray, shape (n_events, n_channels)
        Fraction of each event's scalp artefact seen by each channel (1 for scalp).

    Returns
    -------
    flow_factor : ndarray, shape (n_times, n_channels)
        Multiplies the flow (1 = no artefact); always > 0.
    rate_factor : ndarray, shape (n_times, n_channels)
        Multiplies the count rate; always > 0.
    """
    n_channels = shares.shape[1] if len(events) else 1
    flow = np.ones((times_s.size, n_channels))
    rate = np.ones((times_s.size, n_channels))
    for event, share in zip(events, shares, strict=True):
        since = times_s - event["onset_s"]
        inside = (since >= 0) & (since < event["duration_s"])
        bump = np.where(inside, 0.5 * (1.0 - np.cos(2 * np.pi * since / event["duration_s"])), 0.0)
        flow *= 1.0 + np.outer(bump, share) * event["scalp_pct"] / 100.0
        rate *= 1.0 + np.outer(bump, np.ones(n_channels)) * min(event["count_rate_change"], 0.0)
        if event["kind"] == "step":
            ramp = np.clip(since / event["duration_s"], 0.0, 1.0)
            relax = np.exp(-np.maximum(since - event["duration_s"], 0.0) / event["recovery_s"])
            level = ramp * relax
            flow *= 1.0 + np.outer(level, share) * event["step_pct"] / 100.0
            rate *= 1.0 + np.outer(ramp, np.ones(n_channels)) * event["count_rate_change"]
    return np.maximum(flow, 0.05), np.maximum(rate, 0.05)


def accelerometer(
    times_s: np.ndarray, events: list[dict], rng: np.random.Generator, *, noise_g: float = 0.003
) -> dict[str, np.ndarray]:
    """Three-axis head accelerometer trace in units of g, moving at the motion events.

    Parameters
    ----------
    times_s : ndarray, shape (n_times,)
        Evenly spaced sample times in seconds.
    events : list of dict
        From :func:`draw_motion_events`.
    rng : numpy.random.Generator
    noise_g : float, default=0.003
        White sensor noise, g.

    Returns
    -------
    dict
        ``accel_x``, ``accel_y``, ``accel_z``: gravity projected on a slightly tilted
        head, sensor noise, shaking bursts (0.5-4 Hz, 0.05-0.4 g) during each event and a
        persistent tilt change after a step.
    """
    n = times_s.size
    sfreq = 1.0 / (times_s[1] - times_s[0])
    gravity = np.array([rng.uniform(-0.2, 0.2), rng.uniform(-0.2, 0.2), 1.0])
    gravity = np.tile(gravity / np.linalg.norm(gravity), (n, 1))
    shake = power_law_noise(n, sfreq, 0.0, rng, min_hz=0.5, max_hz=min(4.0, sfreq / 3), n_series=3)
    envelope = np.zeros((n, 3))
    for event in events:
        since = times_s - event["onset_s"]
        inside = (since >= 0) & (since < event["duration_s"])
        bump = np.where(inside, np.sin(np.pi * since / event["duration_s"]), 0.0)
        envelope += np.outer(bump, rng.uniform(0.05, 0.4, 3))
        if event["kind"] == "step":
            tilt = rng.uniform(-0.1, 0.1, 3)
            gravity += np.outer(np.clip(since / event["duration_s"], 0.0, 1.0), tilt)
    gravity /= np.linalg.norm(gravity, axis=1, keepdims=True)  # a tilt keeps |g| = 1
    values = gravity + envelope * shake + noise_g * rng.standard_normal((n, 3))
    return {f"accel_{axis}": values[:, i] for i, axis in enumerate("xyz")}
