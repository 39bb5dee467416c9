"""Build a design matrix from a validated design and a recording."""

from __future__ import annotations

import logging
import warnings

import numpy as np

from fstats.design.cardiac import detect_heartbeats, retroicor_terms
from fstats.design.checks import task_column_names
from fstats.design.contrasts import expand_contrasts
from fstats.design.diagnostics import collinearity_report
from fstats.design.drift import dct_drift, dct_order, polynomial_drift
from fstats.design.matrix import DesignMatrix
from fstats.design.nuisance import (
    accelerometer_magnitude,
    lagged,
    spike_indicators,
    standardise,
)
from fstats.design.regressors import fir_regressors, task_regressor
from fstats.design.response import FLOW_PEAK_S, FLOW_SHAPE
from fstats.design.spec import DesignSpec
from fstats.design.timing import design_events
from fstats.errors import DesignWarning, InputError, suggest
from fstats.inputs.recording import Recording, TaskTiming

__all__ = ["DEFAULT_CUTOFF_S", "build_design"]

logger = logging.getLogger(__name__)

#: Drift cutoff period (s) when a cosine basis is declared without ``cutoff_s``.
DEFAULT_CUTOFF_S: float = 128.0
#: Beat quality below which the cardiac detection is reported as doubtful.
_BEAT_QUALITY_WARN = 0.8


def _response_params(cond) -> tuple[str, dict]:
    resp = cond.response
    if resp.model in ("flow", "gamma_variate"):
        params = {
            "peak_s": resp.peak_s if resp.peak_s is not None else FLOW_PEAK_S,
            "shape": resp.shape if resp.shape is not None else FLOW_SHAPE,
            "lag_s": resp.lag_s if resp.lag_s is not None else 0.0,
        }
    elif resp.model == "boxcar":
        params = {"lag_s": resp.lag_s or 0.0}
    elif resp.model == "fir":
        params = {"bin_s": resp.bin_s, "n_bins": resp.n_bins}
    else:
        params = {}
    return resp.model, params


def _orthogonalise(column: np.ndarray, main: np.ndarray) -> np.ndarray:
    """Remove the projection on ``main`` and scale to ``main``'s standard deviation."""
    denom = main @ main
    out = column - (column @ main / denom) * main if denom > 0 else column.copy()
    sd = out.std()
    return out * (main.std() / sd) if sd > 0 else out


def _task_columns(spec, times, timing, n_times):
    values, names, conditions, fir_times, responses = [], [], {}, {}, {}
    planned = task_column_names(spec)
    for cond_name, cond in spec.conditions.items():
        ev = timing.select(cond_name)
        model, params = _response_params(cond)
        responses[cond_name] = {"model": model, **params, "derivatives": list(cond.derivatives)}
        amps = ev.amplitudes if cond.amplitude == "scale" else np.ones(len(ev))
        if model == "fir":
            if params["n_bins"] > n_times:
                raise InputError(
                    spec.source,
                    spec.where("conditions", cond_name, "response", "n_bins"),
                    f"at most as many FIR bins as samples ({n_times})",
                    params["n_bins"],
                )
            cols = fir_regressors(
                times, ev.onsets_s, amps, bin_s=params["bin_s"], n_bins=params["n_bins"]
            )
            fir_times[cond_name] = params["bin_s"] * np.arange(params["n_bins"])
        else:
            cols = task_regressor(
                times,
                ev.onsets_s,
                ev.durations_s,
                amps,
                model=model,
                params=params,
                derivatives=tuple(cond.derivatives),
            )
            for j in range(1, cols.shape[1]):
                cols[:, j] = _orthogonalise(cols[:, j], cols[:, 0])
        if cond.amplitude == "modulate" and model != "fir":
            centred = ev.amplitudes - ev.amplitudes.mean() if len(ev) else ev.amplitudes
            if not np.any(np.abs(centred) > 0):
                warnings.warn(
                    f"{spec.source}: condition {cond_name!r} has constant amplitudes; its "
                    "parametric modulator column is all zeros",
                    DesignWarning,
                    stacklevel=3,
                )
            pm = task_regressor(
                times, ev.onsets_s, ev.durations_s, centred, model=model, params=params
            )
            cols = np.column_stack([cols, pm[:, 0]])
        values.append(cols)
        names.extend(planned[cond_name])
        conditions[cond_name] = planned[cond_name]
    return values, names, conditions, fir_times, responses


def _drift_columns(spec, n_times, step, duration):
    d = spec.drift
    if d.basis == "cosine":
        cutoff = d.cutoff_s if d.cutoff_s is not None else DEFAULT_CUTOFF_S
        if cutoff > duration:
            raise InputError(
                spec.source,
                spec.where("drift", "cutoff_s"),
                f"a cutoff period no longer than the recording ({duration:g} s)",
                cutoff,
            )
        cols = dct_drift(n_times, step, cutoff)
        return cols, [f"drift_{k:02d}" for k in range(1, dct_order(n_times, step, cutoff) + 1)]
    if d.basis == "polynomial":
        if d.order >= n_times:
            raise InputError(
                spec.source,
                spec.where("drift", "order"),
                f"a polynomial order below the number of samples ({n_times})",
                d.order,
            )
        return polynomial_drift(n_times, d.order), [f"drift_p{k}" for k in range(1, d.order + 1)]
    return np.zeros((n_times, 0)), []


def _channel(spec, recording, name, key_path, pool=None):
    names = recording.channel_names if pool is None else pool
    if name not in names:
        raise InputError(
            spec.source,
            spec.where(*key_path),
            f"a channel of {recording.source or 'the recording'} ({', '.join(names) or 'none'})",
            name,
            hint=suggest(name, names),
        )
    return recording.channel_flow(name)


def _aux(spec, recording, name, key_path):
    if name not in recording.aux:
        raise InputError(
            spec.source,
            spec.where(*key_path),
            f"an auxiliary signal of {recording.source or 'the recording'} "
            f"({', '.join(recording.aux) or 'none'})",
            name,
            hint=suggest(name, list(recording.aux)),
        )
    return recording.aux[name]


def _short_columns(spec, recording, times):
    short = spec.nuisance.short_channels
    if short is None:
        return [], []
    if short.channels == "all":
        chosen = list(recording.short_channels)
        if not chosen:
            raise InputError(
                recording.source or "<recording>",
                "channels",
                "a short-separation channel (nuisance.short_channels in the design)",
                "none",
            )
        paths = [("nuisance", "short_channels")] * len(chosen)
    else:
        chosen = list(short.channels)
        paths = [("nuisance", "short_channels", "channels", i) for i in range(len(chosen))]
    cols, names = [], []
    for name, path in zip(chosen, paths, strict=False):
        base = standardise(_channel(spec, recording, name, path), zscore=short.zscore)
        cols.append(base)
        names.append(f"short:{name}")
        for lag in short.lags_s:
            cols.append(lagged(base, times, lag))
            names.append(f"short:{name}@{lag:+g}s")
    return cols, names


def _cardiac_columns(spec, recording, times):
    card = spec.nuisance.cardiac
    if card is None:
        return np.zeros((times.size, 0)), [], None, None
    key = ("nuisance", "cardiac")
    if card.source == "aux":
        sig = _aux(spec, recording, card.signal, key + ("signal",))
        values, sig_times, label = sig.values, sig.times_s, f"aux:{sig.name}"
    else:
        pool = recording.short_channels if card.source == "short" else recording.long_channels
        name = card.channel or (pool[0] if pool else None)
        if name is None:
            raise InputError(
                recording.source or "<recording>",
                "channels",
                f"a {card.source} channel for the cardiac source in {spec.source}",
                "none",
            )
        values = _channel(spec, recording, name, key + ("channel",), pool=pool)
        sig_times, label = times, name
    sfreq = float(1.0 / np.median(np.diff(sig_times)))
    try:
        beats = detect_heartbeats(values, sfreq, start_s=float(sig_times[0]))
    except ValueError as exc:
        raise InputError(
            spec.source, spec.where(*key), "a signal fit for heartbeat detection", str(exc)
        ) from None
    if beats.n_beats < 3:
        raise InputError(
            spec.source, spec.where(*key), f"heartbeats in {label}", f"{beats.n_beats} beats"
        )
    if beats.beat_quality < _BEAT_QUALITY_WARN:
        warnings.warn(
            f"{recording.source or 'recording'}: heartbeat detection in {label} is doubtful "
            f"(beat quality {beats.beat_quality:.2f} < {_BEAT_QUALITY_WARN})",
            DesignWarning,
            stacklevel=3,
        )
    nyquist_hz = 0.5 / float(np.median(np.diff(times)))
    top_hz = card.harmonics * beats.heart_rate_bpm / 60.0
    if top_hz >= nyquist_hz:
        warnings.warn(
            f"{spec.source}: cardiac harmonic {card.harmonics} ({top_hz:.2f} Hz) is above the "
            f"flow's Nyquist frequency ({nyquist_hz:g} Hz) and aliases; lower "
            "nuisance.cardiac.harmonics",
            DesignWarning,
            stacklevel=3,
        )
    cols = retroicor_terms(times, beats.beat_times_s, card.harmonics)
    names = []
    for m in range(1, card.harmonics + 1):
        names += [f"cardiac_cos{m}", f"cardiac_sin{m}"]
    summary = {
        "heart_rate_bpm": beats.heart_rate_bpm,
        "n_beats": beats.n_beats,
        "beat_quality": beats.beat_quality,
        "source_channel": label,
        "source": card.source,
        "dominant_hz": beats.dominant_hz,
        "band_hz": list(beats.band_hz),
        "harmonics": card.harmonics,
    }
    return cols, names, summary, beats.beat_times_s


def _aux_and_motion(spec, recording, times):
    cols, names, kinds = [], [], []
    for i, aux in enumerate(spec.nuisance.aux):
        sig = _aux(spec, recording, aux.signal, ("nuisance", "aux", i, "signal"))
        base = standardise(sig.on(times), zscore=aux.zscore)
        cols.append(base)
        names.append(f"aux:{aux.signal}")
        kinds.append("aux")
        for lag in aux.lags_s:
            cols.append(lagged(base, times, lag))
            names.append(f"aux:{aux.signal}@{lag:+g}s")
            kinds.append("aux")
    motion = spec.nuisance.motion
    if motion is not None:
        axes = []
        for i, name in enumerate(motion.accelerometer):
            sig = _aux(spec, recording, name, ("nuisance", "motion", "accelerometer", i))
            axes.append(sig.on(times))
            cols.append(standardise(axes[-1]))
            names.append(f"motion:{name}")
            kinds.append("motion")
        if motion.spikes is not None:
            sp = motion.spikes
            if sp.detect_in == "accelerometer":
                source = accelerometer_magnitude(np.column_stack(axes))
            else:
                source = _channel(
                    spec, recording, sp.detect_in, ("nuisance", "motion", "spikes", "detect_in")
                )
            spikes = spike_indicators(source, threshold_z=sp.threshold_z, max_spikes=sp.max_spikes)
            for j in range(spikes.shape[1]):
                cols.append(spikes[:, j])
                names.append(f"motion:spike{j:03d}")
                kinds.append("motion")
    return cols, names, kinds


def build_design(
    spec: DesignSpec, recording: Recording, *, events: TaskTiming | None = None
) -> DesignMatrix:
    """The design matrix of a design for one recording.

    Parameters
    ----------
    spec : DesignSpec
        A validated design (:func:`fstats.design.load_design`).
    recording : Recording
        The recording: time base, channels, aux signals, and its own events when
        the design takes events from the recording.
    events : TaskTiming, optional
        Events replacing the design's timing (rename/ignore rules still apply).

    Returns
    -------
    DesignMatrix
        Columns in the order task, constant, drift, short, cardiac, aux, motion.
        ``info`` holds ``design`` (name, source), ``responses``, ``n_events``,
        ``events`` (the TaskTiming used), ``cardiac`` (heart_rate_bpm, n_beats,
        beat_quality, source_channel, source, dominant_hz, band_hz, harmonics: plain
        numbers and text; None without cardiac terms), ``heartbeats_s`` (ndarray of
        detected beat times in s, or None),
        ``diagnostics`` (condition_number, vif, nuisance_r2, warnings) and
        ``fit_options`` (passed through untouched).

    Raises
    ------
    InputError
        When the design does not fit the recording (unknown channel or aux signal,
        cutoff longer than the recording, more FIR bins than samples, missing
        events, no detectable heartbeat).

    Warns
    -----
    DesignWarning
        For task regressors nearly collinear with drift/nuisance terms, doubtful
        heartbeat detection, unknown trial types and overlapping events.
    """
    times = np.asarray(recording.times_s, dtype=float)
    n_times = times.size
    step = float(np.median(np.diff(times)))
    timing = design_events(spec, recording, events=events)
    task_vals, names, conditions, fir, responses = _task_columns(spec, times, timing, n_times)
    kinds = ["task"] * len(names)
    blocks = list(task_vals)

    blocks.append(np.ones((n_times, 1)))
    names.append("constant")
    kinds.append("constant")

    drift, drift_names = _drift_columns(spec, n_times, step, recording.duration_s)
    blocks.append(drift)
    names += drift_names
    kinds += ["drift"] * len(drift_names)

    short_cols, short_names = _short_columns(spec, recording, times)
    if short_cols:
        blocks.append(np.column_stack(short_cols))
    names += short_names
    kinds += ["short"] * len(short_names)

    card_cols, card_names, card_info, beat_times = _cardiac_columns(spec, recording, times)
    blocks.append(card_cols)
    names += card_names
    kinds += ["cardiac"] * len(card_names)

    other_cols, other_names, other_kinds = _aux_and_motion(spec, recording, times)
    if other_cols:
        blocks.append(np.column_stack(other_cols))
    names += other_names
    kinds += other_kinds

    values = np.column_stack(blocks)
    diagnostics = collinearity_report(values, tuple(names), tuple(kinds))
    for message in diagnostics["warnings"]:
        warnings.warn(f"{spec.source}: {message}", DesignWarning, stacklevel=2)
    info = {
        "design": {"name": spec.name, "source": spec.source, "spec": spec.model_dump()},
        "responses": responses,
        "n_events": {c: len(timing.select(c)) for c in spec.conditions},
        "events": timing,
        "cardiac": card_info,
        "heartbeats_s": beat_times,
        "diagnostics": diagnostics,
        "fit_options": dict(spec.fit_options),
    }
    logger.info(
        "design %r for %s: %d columns, condition number %.3g",
        spec.name,
        recording.source or "recording",
        len(names),
        diagnostics["condition_number"],
    )
    return DesignMatrix(
        values=values,
        names=tuple(names),
        kinds=tuple(kinds),
        times_s=times,
        conditions=conditions,
        contrasts=expand_contrasts(spec, names, conditions, fir),
        fir_times_s=fir,
        info=info,
    )
