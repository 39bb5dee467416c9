"""The task timing a design implies: a repeating cycle, or renamed/merged events."""

from __future__ import annotations

import math
import warnings
from pathlib import Path

import numpy as np

from fstats.design.spec import CycleSpec, DesignSpec
from fstats.errors import DesignWarning, InputError, suggest
from fstats.inputs import read_events
from fstats.inputs.recording import Recording, TaskTiming

__all__ = ["cycle_events", "design_events"]


def cycle_events(
    cycle: CycleSpec, *, start_s: float = 0.0, end_s: float | None = None
) -> TaskTiming:
    """Every segment of a repeating cycle as an event (baseline labels included).

    Parameters
    ----------
    cycle : CycleSpec
        Segments, lead-in, period and number of repeats.
    start_s : float, default=0
        Time (s) the cycle's clock starts at (the recording's first sample).
    end_s : float, optional
        End of the recording (s).  With ``repeats`` unset, cycles repeat until a
        segment would start at or after ``end_s`` (a last block cut short by the
        end of the recording is kept).  Needed when ``repeats`` is unset.

    Returns
    -------
    TaskTiming
        Events in onset order, ``conditions`` = segment labels, amplitudes 1,
        ``source = "design"``.
    """
    offsets, lengths, labels = [], [], []
    end = 0.0
    for seg in cycle.segments:
        at = end if seg.at_s is None else seg.at_s
        offsets.append(at)
        lengths.append(seg.length_s)
        labels.append(seg.label)
        end = at + seg.length_s
    period = cycle.period_s if cycle.period_s is not None else end
    first = start_s + cycle.lead_in_s
    if cycle.repeats is not None:
        repeats = cycle.repeats
    elif end_s is None:
        raise ValueError("cycle_events needs end_s when the cycle has no 'repeats'")
    else:
        repeats = max(0, math.ceil((end_s - first) / period))
    onsets = (first + period * np.arange(repeats)[:, None] + np.array(offsets)[None, :]).ravel()
    durations = np.tile(np.array(lengths, dtype=float), repeats)
    conditions = tuple(labels) * repeats
    if end_s is not None and cycle.repeats is None:
        keep = onsets < end_s - 1e-9
        onsets, durations = onsets[keep], durations[keep]
        conditions = tuple(c for c, k in zip(conditions, keep, strict=False) if k)
    return TaskTiming(
        onsets_s=onsets,
        durations_s=durations,
        conditions=conditions,
        amplitudes=np.ones(onsets.size),
        source="design",
    )


_STEM_SUFFIXES = ("_flow.tsv", "_flow.csv", "_dcs.snirf")


def _recording_stem(recording: Recording) -> tuple[str, str]:
    source = Path(recording.source or "recording")
    name = source.name
    for suffix in _STEM_SUFFIXES:
        if name.endswith(suffix):
            return name[: -len(suffix)], str(source.parent)
    return source.stem, str(source.parent)


def _read_events_file(spec: DesignSpec, recording: Recording) -> TaskTiming:
    text = spec.timing.events.file
    if "{" in text:
        stem, folder = _recording_stem(recording)
        try:
            text = text.format(stem=stem, dir=folder)
        except (KeyError, IndexError, ValueError):
            raise InputError(
                spec.source,
                spec.where("timing", "events", "file"),
                "a path with only the placeholders {stem} and {dir}",
                spec.timing.events.file,
            ) from None
    raw = Path(text)
    path = raw if raw.is_absolute() else Path(spec.source).parent / raw
    if not path.exists():
        raise InputError(
            spec.source,
            spec.where("timing", "events", "file"),
            "an existing events file (relative paths start at the design file's folder)",
            str(path),
        )
    return read_events(path, recording_duration_s=recording.duration_s)


def _select(spec: DesignSpec, timing: TaskTiming) -> TaskTiming:
    """Keep the condition events; rename/merge, ignore, check and warn."""
    names = list(timing.conditions)
    rules = spec.timing.events
    if rules is not None:
        names = [rules.rename.get(n, n) for n in names]
        ignore = set(rules.ignore)
    else:
        ignore = set()
    known = set(spec.conditions) | set(spec.baseline) | ignore
    unknown = sorted({n for n in names if n not in known})
    if unknown:
        warnings.warn(
            f"{timing.source or 'events'}: trial types {unknown} are neither conditions, "
            "baseline nor ignored in the design; their events are left out",
            DesignWarning,
            stacklevel=3,
        )
    present = set(names)
    for cond in spec.conditions:
        if cond not in present:
            raise InputError(
                spec.source,
                spec.where("conditions", cond),
                f"events of trial type {cond!r} in {timing.source or 'the task timing'}",
                sorted(present),
                hint=suggest(cond, sorted(present)),
            )
    keep = np.array([n in spec.conditions for n in names], dtype=bool)
    order = np.argsort(timing.onsets_s[keep], kind="stable")
    onsets = timing.onsets_s[keep][order]
    durations = timing.durations_s[keep][order]
    amplitudes = timing.amplitudes[keep][order]
    kept = [n for n, k in zip(names, keep, strict=False) if k]
    conditions = tuple(kept[i] for i in order)
    for cond in spec.conditions:
        sel = np.array([c == cond for c in conditions])
        on, du = onsets[sel], durations[sel]
        if on.size > 1 and np.any(on[1:] < (on + du)[:-1] - 1e-9):
            warnings.warn(
                f"{timing.source or 'events'}: events of condition {cond!r} overlap; "
                "their responses add up in the regressor",
                DesignWarning,
                stacklevel=3,
            )
    return TaskTiming(
        onsets_s=onsets,
        durations_s=durations,
        conditions=conditions,
        amplitudes=amplitudes,
        source=timing.source,
    )


def design_events(
    spec: DesignSpec, recording: Recording, *, events: TaskTiming | None = None
) -> TaskTiming:
    """The condition events a design implies for one recording.

    Parameters
    ----------
    spec : DesignSpec
        The design.
    recording : Recording
        The recording (its time base, and its own events when the design takes
        events from the recording).
    events : TaskTiming, optional
        Events that replace the design's timing (renaming and ignore rules of
        ``timing.events`` still apply).

    Returns
    -------
    TaskTiming
        Events of the declared conditions only (baseline segments and ignored
        trial types left out), in onset order.

    Raises
    ------
    InputError
        When events are needed but absent, or a declared condition has no events.
    """
    start = float(recording.times_s[0])
    end = start + recording.duration_s
    if events is not None:
        timing = events
    elif spec.timing.cycle is not None:
        timing = cycle_events(spec.timing.cycle, start_s=start, end_s=end)
        late = timing.onsets_s >= end - 1e-9
        if late.any():
            warnings.warn(
                f"{spec.source}: {int(late.sum())} segments of timing.cycle start after the "
                f"recording ends ({end:g} s); they are left out (check 'repeats')",
                DesignWarning,
                stacklevel=2,
            )
            keep = ~late
            timing = TaskTiming(
                onsets_s=timing.onsets_s[keep],
                durations_s=timing.durations_s[keep],
                conditions=tuple(c for c, k in zip(timing.conditions, keep, strict=True) if k),
                amplitudes=timing.amplitudes[keep],
                source=timing.source,
            )
    elif spec.timing.events.source == "file":
        timing = _read_events_file(spec, recording)
    else:
        timing = recording.events
        if timing is None or len(timing) == 0:
            raise InputError(
                recording.source or "<recording>",
                "events",
                f"task events (an events.tsv sidecar or SNIRF stims) for design {spec.name!r}",
                "none",
                hint="give the events file, or declare timing.cycle in the design",
            )
    return _select(spec, timing)
