"""Task regressors built on a fine time grid and integrated over each data sample.

A condition's stimulus (blocks of any length, or 0-length impulses, each scaled by its
amplitude) is laid on a grid ``oversample`` times finer than the data (at least
100 Hz), convolved with the response kernel by FFT, and averaged over each data
sample's interval ``[t_k, t_k + dt)``.  Averaging (rather than point sampling)
matches what a detector integrating over each sample sees and keeps brief events
from falling between samples.
"""

from __future__ import annotations

import math

import numpy as np
from scipy import signal

from fstats.design.response import kernel_length_s, response_kernel

__all__ = [
    "FINE_STEP_MAX_S",
    "fine_grid",
    "stimulus_on_grid",
    "convolve_on_grid",
    "average_to_samples",
    "task_regressor",
    "derivative_kernels",
    "fir_regressors",
]

#: Coarsest allowed step (s) of the fine grid (100 Hz).
FINE_STEP_MAX_S: float = 0.01

#: Parameter perturbed for the dispersion derivative of each model, and its step.
_DISPERSION = {"glover": "b1_s", "canonical": "scale_s", "flow": "shape", "gamma_variate": "shape"}
_DISPERSION_DEFAULTS = {"b1_s": 0.9, "scale_s": 1.0, "shape": 4.0}


def fine_grid(start_s: float, step_s: float, n_times: int) -> tuple[int, float]:
    """Oversampling factor and fine step for a data grid.

    Parameters
    ----------
    start_s : float
        Time of the first data sample (s); not used beyond documentation symmetry.
    step_s : float
        Data sample step (s).
    n_times : int
        Number of data samples.

    Returns
    -------
    oversample : int
        Fine steps per data sample (so each sample spans a whole number of them).
    fine_step_s : float
        ``step_s / oversample`` (<= FINE_STEP_MAX_S).
    """
    oversample = max(1, math.ceil(step_s / FINE_STEP_MAX_S - 1e-9))
    return oversample, step_s / oversample


def stimulus_on_grid(
    onsets_s: np.ndarray,
    durations_s: np.ndarray,
    amplitudes: np.ndarray,
    *,
    start_s: float,
    fine_step_s: float,
    n_fine: int,
) -> np.ndarray:
    """The stimulus averaged over each fine-grid bin ``[t_i, t_i + step)``.

    Parameters
    ----------
    onsets_s, durations_s, amplitudes : ndarray, shape (n_events,)
        Event starts and lengths (s) and heights.  A 0-length event is an impulse
        of area ``amplitude`` (the same area as a 1-s block of that height).
    start_s : float
        Time of the first fine bin (s).
    fine_step_s : float
        Fine-grid step (s).
    n_fine : int
        Number of fine bins.

    Returns
    -------
    ndarray, shape (n_fine,)
        Bin averages: a block contributes its height times the covered fraction of
        each bin (exact, also for edges inside a bin); an impulse contributes
        ``amplitude / fine_step_s`` split linearly between the two bins whose
        centres bracket its onset.
        Events outside the grid are clipped.
    """
    onsets = np.asarray(onsets_s, dtype=float)
    durations = np.asarray(durations_s, dtype=float)
    amps = np.asarray(amplitudes, dtype=float)
    steps = np.zeros(n_fine + 2)
    impulses = np.zeros(n_fine + 2)
    is_block = durations > 0
    # Blocks: a step up at the onset and down at the offset; a step inside bin k
    # at fraction f covers (1 - f) of bin k and all later bins.
    for edges, sign in ((onsets[is_block], 1.0), (onsets[is_block] + durations[is_block], -1.0)):
        u = np.clip((edges - start_s) / fine_step_s, 0.0, n_fine)
        k = np.floor(u).astype(int)
        f = u - k
        np.add.at(steps, k, sign * amps[is_block] * (1.0 - f))
        np.add.at(steps, k + 1, sign * amps[is_block] * f)
    stim = np.cumsum(steps)[:n_fine]
    # Impulses: area split linearly between the two bins whose centres (t_i + step/2)
    # bracket the onset, so the mass sits at the onset to second order.
    u = (onsets[~is_block] - start_s) / fine_step_s
    inside = (u >= 0) & (u < n_fine)
    u, a = np.clip(u[inside] - 0.5, 0.0, None), amps[~is_block][inside]
    k = np.floor(u).astype(int)
    f = u - k
    np.add.at(impulses, k, a * (1.0 - f) / fine_step_s)
    np.add.at(impulses, k + 1, a * f / fine_step_s)
    return stim + impulses[:n_fine]


def convolve_on_grid(stimulus: np.ndarray, kernel: np.ndarray, fine_step_s: float) -> np.ndarray:
    """Causal convolution of a fine-grid stimulus with a kernel (FFT), same length.

    Parameters
    ----------
    stimulus : ndarray, shape (n_fine,) or (n_fine, n_columns)
        Stimulus bin averages.
    kernel : ndarray, shape (n_kernel,)
        Kernel sampled on the fine grid (unit area: ``sum * fine_step_s == 1``).
    fine_step_s : float
        Fine-grid step (s).

    Returns
    -------
    ndarray, same shape as ``stimulus``
        ``sum_j stimulus[i - j] * kernel[j] * fine_step_s``.
    """
    stim = np.asarray(stimulus, dtype=float)
    ker = kernel if stim.ndim == 1 else kernel[:, None]
    out = signal.fftconvolve(stim, ker, mode="full", axes=0)[: stim.shape[0]]
    return out * fine_step_s


def average_to_samples(fine: np.ndarray, oversample: int) -> np.ndarray:
    """Average each run of ``oversample`` fine values: one value per data sample.

    Parameters
    ----------
    fine : ndarray, shape (n_times * oversample,) or (n_times * oversample, n_columns)
        Values on the fine grid.
    oversample : int
        Fine steps per data sample.

    Returns
    -------
    ndarray, shape (n_times,) or (n_times, n_columns)
        Mean over ``[t_k, t_k + dt)`` of each data sample.
    """
    n = fine.shape[0] // oversample
    return fine[: n * oversample].reshape((n, oversample) + fine.shape[1:]).mean(axis=1)


def _stimulus_for(times_s, onsets_s, durations_s, amplitudes, *, memory_s=0.0):
    """Fine-grid stimulus for a data grid, padded before the first sample when events
    start before it (by ``memory_s``, the kernel's length, so responses to them that
    reach into the recording are kept).  Returns (stim, oversample, fine_step, n_pad)."""
    step = float(np.median(np.diff(times_s)))
    oversample, fine_step = fine_grid(float(times_s[0]), step, times_s.size)
    onsets = np.asarray(onsets_s, dtype=float)
    n_pad = 0
    if memory_s > 0 and onsets.size and onsets.min() < times_s[0]:
        n_pad = int(np.ceil(memory_s / step))
    stim = stimulus_on_grid(
        onsets,
        durations_s,
        amplitudes,
        start_s=float(times_s[0]) - n_pad * step,
        fine_step_s=fine_step,
        n_fine=(times_s.size + n_pad) * oversample,
    )
    return stim, oversample, fine_step, n_pad


def derivative_kernels(
    model: str, params: dict, fine_step_s: float, which: tuple[str, ...]
) -> list[np.ndarray]:
    """Temporal and/or dispersion derivative kernels of a response model.

    Parameters
    ----------
    model : str
        Response model (not ``boxcar`` or ``fir``).
    params : dict
        Model parameters.
    fine_step_s : float
        Grid step (s).
    which : tuple of {"temporal", "dispersion"}
        Derivatives wanted, in order.

    Returns
    -------
    list of ndarray
        Temporal: dh/dt by central differences (1/s^2 units, unit-area h).
        Dispersion: (h(p) - h(p + dp)) / dp for the model's width parameter
        (Glover ``b1_s``, canonical ``scale_s``, gamma variate ``shape`` at fixed
        peak), dp = 1 % of p; padded with zeros to the longer kernel.
    """
    base = response_kernel(model, params, fine_step_s)
    out = []
    for name in which:
        if name == "temporal":
            out.append(np.gradient(base, fine_step_s))
        else:
            key = _DISPERSION[model]
            value = float(params.get(key, _DISPERSION_DEFAULTS[key]))
            delta = 0.01 * value
            other = response_kernel(model, {**params, key: value + delta}, fine_step_s)
            n = max(base.size, other.size)
            a = np.pad(base, (0, n - base.size))
            b = np.pad(other, (0, n - other.size))
            out.append((a - b) / delta)
    return out


def task_regressor(
    times_s: np.ndarray,
    onsets_s: np.ndarray,
    durations_s: np.ndarray,
    amplitudes: np.ndarray,
    *,
    model: str,
    params: dict | None = None,
    derivatives: tuple[str, ...] = (),
) -> np.ndarray:
    """One condition's regressor(s) on the data time base.

    Parameters
    ----------
    times_s : ndarray, shape (n_times,)
        Data sample times (s), evenly spaced.
    onsets_s, durations_s, amplitudes : ndarray, shape (n_events,)
        The condition's events (s, s, unitless).
    model : {"flow", "gamma_variate", "glover", "canonical", "boxcar"}
        Response model.  ``boxcar`` uses the stimulus itself (optionally delayed
        by ``params["lag_s"]``).
    params : dict, optional
        Model parameters.
    derivatives : tuple of {"temporal", "dispersion"}
        Extra columns with derivative kernels.

    Returns
    -------
    ndarray, shape (n_times, 1 + len(derivatives))
        Sample averages of the convolved stimulus.  A long block of height a
        plateaus at a; an impulse of amplitude a gives a times the unit-area kernel.
        Events that start before the first sample still contribute the part of their
        response that falls inside the recording.
    """
    params = dict(params or {})
    times_s = np.asarray(times_s, dtype=float)
    if model == "boxcar":
        lag = float(params.get("lag_s", 0.0))
        stim, oversample, _, _ = _stimulus_for(
            times_s, np.asarray(onsets_s) + lag, durations_s, amplitudes
        )
        return average_to_samples(stim, oversample)[:, None]
    stim, oversample, fine_step, n_pad = _stimulus_for(
        times_s, onsets_s, durations_s, amplitudes, memory_s=kernel_length_s(model, params)
    )
    kernels = [response_kernel(model, params, fine_step)]
    kernels += derivative_kernels(model, params, fine_step, tuple(derivatives))
    columns = [convolve_on_grid(stim, k, fine_step) for k in kernels]
    return average_to_samples(np.column_stack(columns), oversample)[n_pad:]


def fir_regressors(
    times_s: np.ndarray,
    onsets_s: np.ndarray,
    amplitudes: np.ndarray,
    *,
    bin_s: float,
    n_bins: int,
) -> np.ndarray:
    """Finite-impulse-response basis: one column per post-onset bin.

    Parameters
    ----------
    times_s : ndarray, shape (n_times,)
        Data sample times (s), evenly spaced.
    onsets_s, amplitudes : ndarray, shape (n_events,)
        Event onsets (s) and heights; FIR bins are locked to onsets, so event
        durations do not enter.
    bin_s : float
        Bin width (s).
    n_bins : int
        Number of bins; bin j covers [onset + j bin_s, onset + (j+1) bin_s).

    Returns
    -------
    ndarray, shape (n_times, n_bins)
        Column j is the fraction of each data sample covered by bin j of any event
        (times its amplitude): 1 inside, 0 outside, fractional at the edges.
    """
    onsets = np.asarray(onsets_s, dtype=float)
    amps = np.asarray(amplitudes, dtype=float)
    columns = []
    for j in range(n_bins):
        stim, oversample, _, _ = _stimulus_for(
            np.asarray(times_s, dtype=float), onsets + j * bin_s, np.full(onsets.size, bin_s), amps
        )
        columns.append(average_to_samples(stim, oversample))
    return np.column_stack(columns) if columns else np.zeros((len(times_s), 0))
