"""Task timing and the flow responses it evokes in the simulation.

The cerebral flow response kernel is the simulator's own and deliberately not the
analysis default, so that calibration runs test the analysis on a response it did
not assume: a gamma variate with a small, late undershoot,

    h(t) = G(t; k=4, θ) - 0.06 · G(t; k=8, 1.2 θ),   θ = peak / 3,

with G the gamma density of shape k and scale θ, rescaled to unit area so that a
long block plateaus at 1.  Its peak lies near ``peak`` (4.5 s by default); cerebral
blood flow responds about 1 s earlier than the BOLD signal, whose canonical kernel
peaks at ~5 s (Magn Reson Med 2000, 43(5):768-772, CBF peak 4.2 s vs BOLD 5.1 s
after a brief stimulus; REFERENCE-CHECKS 1.5).  The scalp (systemic) response is
slower and later: a gamma variate of shape 3 peaking at ``peak + delay`` plus 2 s,
without undershoot (our choice; recalled from memory that systemic responses to
mental effort are slower and broader than cerebral ones).
"""

from __future__ import annotations

import numpy as np
from scipy import signal, stats

from fstats.inputs.recording import TaskTiming

__all__ = [
    "block_timeline",
    "event_timeline",
    "cerebral_kernel",
    "scalp_kernel",
    "evoked_response",
]


def block_timeline(
    duration_s: float, *, rest_s: float = 20.0, subtract_s: float = 40.0, recover_s: float = 25.0
) -> TaskTiming:
    """Blocks of the demo scenario: rest, ``subtract``, ``recover``, repeated (onsets in s).

    The cycle starts at 0 s with rest and repeats for the whole recording, as the task
    program would run: every segment starting before the end is kept, the last one cut
    short by the end of the recording (the rule of a repeating ``cycle`` in the design
    YAML, so that a design written for the scenario matches the simulated timing).

    Parameters
    ----------
    duration_s : float
        Recording length in seconds.
    rest_s, subtract_s, recover_s : float
        Lengths of the rest, task and recovery periods in seconds.

    Returns
    -------
    TaskTiming
        Alternating ``subtract`` and ``recover`` events (rest is not an event), amplitude 1;
        no event extends past ``duration_s``.
    """
    cycle = rest_s + subtract_s + recover_s
    n_cycles = max(int(np.ceil(duration_s / cycle)), 0)
    starts = rest_s + cycle * np.arange(n_cycles)
    onsets = np.column_stack([starts, starts + subtract_s]).ravel()
    durations = np.tile([subtract_s, recover_s], n_cycles).astype(float)
    conditions = ("subtract", "recover") * n_cycles
    keep = onsets < duration_s - 1e-9
    onsets = onsets[keep]
    durations = np.minimum(durations[keep], duration_s - onsets)
    return TaskTiming(
        onsets_s=onsets.astype(float),
        durations_s=durations,
        conditions=tuple(c for c, k in zip(conditions, keep, strict=True) if k),
        amplitudes=np.ones(onsets.size),
        source="simulated",
    )


def event_timeline(
    duration_s: float,
    rng: np.random.Generator,
    *,
    first_onset_s: float = 20.0,
    event_duration_s: float = 1.0,
    interval_s: tuple[float, float] = (12.0, 20.0),
    tail_s: float = 20.0,
) -> TaskTiming:
    """Brief ``cue`` events at jittered intervals (onsets in s).

    Parameters
    ----------
    duration_s : float
        Recording length in seconds.
    rng : numpy.random.Generator
    first_onset_s : float, default=20.0
        Onset of the first event, in s.
    event_duration_s : float, default=1.0
        Length of each event, in s.
    interval_s : (float, float), default=(12.0, 20.0)
        Onset-to-onset interval range; intervals are drawn uniformly.
    tail_s : float, default=20.0
        Minimum time after the last onset before the end of the recording, in s.

    Returns
    -------
    TaskTiming
        Condition ``cue``, amplitude 1.
    """
    low, high = interval_s
    n_max = int((duration_s - first_onset_s) / low) + 2
    onsets = first_onset_s + np.concatenate([[0.0], np.cumsum(rng.uniform(low, high, n_max))])
    onsets = onsets[onsets <= duration_s - tail_s]
    return TaskTiming(
        onsets_s=onsets,
        durations_s=np.full(onsets.size, float(event_duration_s)),
        conditions=("cue",) * onsets.size,
        amplitudes=np.ones(onsets.size),
        source="simulated",
    )


def _unit_area(values: np.ndarray, dt: float) -> np.ndarray:
    return values / (values.sum() * dt)


def cerebral_kernel(sfreq_hz: float, peak_s: float = 4.5, *, length_s: float = 32.0) -> np.ndarray:
    """The simulator's cerebral flow response to a brief stimulus (unit area, 1/s).

    Parameters
    ----------
    sfreq_hz : float
        Sampling rate in Hz.
    peak_s : float, default=4.5
        Approximate time of the peak in seconds (exact for the main lobe alone).
    length_s : float, default=32.0
        Kernel support in seconds.

    Returns
    -------
    ndarray, shape (round(length_s * sfreq_hz),)
        h(t) on t = 0, 1/f, ...; ``sum(h) / sfreq_hz == 1``.
    """
    dt = 1.0 / sfreq_hz
    t = np.arange(int(round(length_s * sfreq_hz))) * dt
    scale = peak_s / 3.0
    main = stats.gamma.pdf(t, 4.0, scale=scale)
    undershoot = stats.gamma.pdf(t, 8.0, scale=1.2 * scale)
    return _unit_area(main - 0.06 * undershoot, dt)


def scalp_kernel(
    sfreq_hz: float, peak_s: float = 4.5, delay_s: float = 2.0, *, length_s: float = 40.0
) -> np.ndarray:
    """The simulator's task-locked systemic (scalp) flow response (unit area, 1/s).

    Parameters
    ----------
    sfreq_hz : float
        Sampling rate in Hz.
    peak_s : float, default=4.5
        Peak of the cerebral kernel in s; the scalp kernel peaks ``delay_s + 2`` s later.
    delay_s : float, default=2.0
        Extra delay in seconds.
    length_s : float, default=40.0

    Returns
    -------
    ndarray, shape (round(length_s * sfreq_hz),)
        Gamma density of shape 3 with its mode at ``peak_s + delay_s + 2``.
    """
    dt = 1.0 / sfreq_hz
    t = np.arange(int(round(length_s * sfreq_hz))) * dt
    return _unit_area(stats.gamma.pdf(t, 3.0, scale=(peak_s + delay_s + 2.0) / 2.0), dt)


def evoked_response(
    times_s: np.ndarray,
    timing: TaskTiming,
    gains: dict[str, float],
    kernel: np.ndarray,
    *,
    event_gains: np.ndarray | None = None,
) -> np.ndarray:
    """Relative flow change evoked by the task: boxcars convolved with a kernel (unitless).

    Parameters
    ----------
    times_s : ndarray, shape (n_times,)
        Evenly spaced sample times in seconds.
    timing : TaskTiming
        Events; each covers the samples with onset <= t < onset + duration (at least
        one sample).
    gains : dict of str to float
        Plateau change per condition, as a fraction (0.15 = 15 %); conditions not
        listed evoke nothing.
    kernel : ndarray, shape (n_kernel,)
        Response kernel of unit area on the same time step.
    event_gains : ndarray, shape (n_events,), optional
        Extra per-event multiplier (block-to-block variability); 1 when None.

    Returns
    -------
    ndarray, shape (n_times,)
    """
    dt = times_s[1] - times_s[0]
    drive = np.zeros(times_s.size)
    for i, (onset, duration, condition) in enumerate(
        zip(timing.onsets_s, timing.durations_s, timing.conditions, strict=True)
    ):
        gain = gains.get(condition, 0.0)
        if gain == 0.0:
            continue
        if event_gains is not None:
            gain *= event_gains[i]
        start = int(np.searchsorted(times_s, onset - 1e-9))
        stop = max(int(np.searchsorted(times_s, onset + duration - 1e-9)), start + 1)
        drive[start:stop] += gain * timing.amplitudes[i]
    if not drive.any():
        return drive
    response = signal.fftconvolve(drive, kernel * dt)[: times_s.size]
    response[: np.argmax(drive != 0)] = 0.0  # exact causality (FFT round-off before onset)
    return response
