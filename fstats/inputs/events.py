"""Task timing as a BIDS ``events.tsv`` file.

Columns (tab-separated): ``onset`` (s) and ``duration`` (s, 0 for an impulse event) are
required, ``trial_type`` names the condition and is required by fstats, and an optional
``amplitude`` column (or ``modulator``, not both) gives a per-event amplitude or parametric
modulator (``n/a`` = 1.0).  Onsets are in seconds on the recording's time base (``time``
column of the flow table, which usually starts at 0).  Other columns are ignored.

A file holding only the header gives no events (with a logged warning).
Refused: a missing column, non-numeric cells, a negative or missing duration, an empty
``trial_type``, and, when the recording's extent is known, an event that starts at or after
the end of the recording.  An event starting before the recording or running past its end
is kept with a logged warning.
"""

from __future__ import annotations

import logging
from collections.abc import Callable
from pathlib import Path

import numpy as np

from fstats.errors import InputError
from fstats.inputs._tabular import (
    float_column,
    format_number,
    read_delimited,
    require_columns,
    text_column,
    write_text_atomic,
)
from fstats.inputs.recording import TaskTiming

__all__ = ["AMPLITUDE_COLUMNS", "read_events", "write_events", "check_event_times"]

logger = logging.getLogger(__name__)

#: Accepted names of the optional per-event amplitude column.
AMPLITUDE_COLUMNS: tuple[str, ...] = ("amplitude", "modulator")


def check_event_times(
    onsets_s: np.ndarray,
    durations_s: np.ndarray,
    *,
    path: str,
    where: Callable[[int, str], str],
    start_s: float = 0.0,
    end_s: float | None = None,
) -> None:
    """Refuse non-finite onsets, negative durations and events after the recording.

    Parameters
    ----------
    onsets_s, durations_s : ndarray, shape (n_events,)
        Event starts and lengths in seconds.
    path : str
        File named in errors.
    where : callable
        (event index, field name) -> location text (``"line 5, column 'onset'"``).
    start_s : float, default=0.0
        First sample time of the recording (s).
    end_s : float, optional
        End of the recording (s, one step past the last sample); unchecked when None.
    """
    for i, (onset, duration) in enumerate(zip(onsets_s, durations_s, strict=True)):
        if not np.isfinite(onset):
            raise InputError(path, where(i, "onset"), "an onset in s", float(onset))
        if not (np.isfinite(duration) and duration >= 0):
            raise InputError(
                path,
                where(i, "duration"),
                "a duration in s >= 0 (0 for an impulse event)",
                float(duration),
            )
        if end_s is not None and onset >= end_s:
            raise InputError(
                path,
                where(i, "onset"),
                f"an onset before the end of the recording ({end_s:.6g} s)",
                float(onset),
                hint="check that events and flow share the same time base and recording",
            )
        if end_s is not None and onset + duration > end_s + 1e-9:
            logger.warning(
                "%s, %s: event runs past the end of the recording (%.6g s > %.6g s)",
                path,
                where(i, "duration"),
                onset + duration,
                end_s,
            )
        if onset < start_s:
            logger.warning(
                "%s, %s: event starts before the first sample (%.6g s < %.6g s)",
                path,
                where(i, "onset"),
                onset,
                start_s,
            )


def read_events(
    path: str | Path,
    *,
    recording_duration_s: float | None = None,
    recording_start_s: float = 0.0,
) -> TaskTiming:
    """Task events from a BIDS ``events.tsv`` file (see the module notes for columns).

    Parameters
    ----------
    path : str or Path
        The events file (tab-separated).
    recording_duration_s : float, optional
        Length of the recording in seconds; events starting at or after
        ``recording_start_s + recording_duration_s`` are refused.  Unchecked when None.
    recording_start_s : float, default=0.0
        Time of the recording's first sample in seconds.

    Returns
    -------
    TaskTiming
        Events sorted by onset (stable, so equal onsets keep file order).

    Raises
    ------
    InputError
        Naming the line and column of the first bad cell.
    """
    path = Path(path)
    table = read_delimited(path, what="task events", allow_empty=True)
    if not table.rows:
        logger.warning("%s: no events (header only)", path)
    require_columns(table, ("onset", "duration", "trial_type"), what="an events table")
    amplitude_columns = [name for name in AMPLITUDE_COLUMNS if name in table.header]
    if len(amplitude_columns) > 1:
        raise InputError(
            path,
            "line 1 (header)",
            f"at most one of the columns {list(AMPLITUDE_COLUMNS)}",
            amplitude_columns,
        )
    onsets = float_column(table, "onset", allow_missing=False)
    durations = float_column(table, "duration", allow_missing=False)
    conditions = text_column(table, "trial_type")
    for row, condition in enumerate(conditions):
        if not condition:
            raise InputError(
                path,
                f"line {table.lines[row]}, column 'trial_type'",
                "a condition name",
                table.rows[row][table.index("trial_type")],
            )
    if amplitude_columns:
        amplitudes = float_column(table, amplitude_columns[0])
        amplitudes = np.where(np.isnan(amplitudes), 1.0, amplitudes)
    else:
        amplitudes = np.ones(onsets.size)

    def where(i: int, field: str) -> str:
        return f"line {table.lines[i]}, column {field!r}"

    end_s = None if recording_duration_s is None else recording_start_s + recording_duration_s
    check_event_times(
        onsets, durations, path=str(path), where=where, start_s=recording_start_s, end_s=end_s
    )
    if amplitude_columns:
        bad = np.flatnonzero(~np.isfinite(amplitudes))
        if bad.size:
            raise InputError(
                path, where(bad[0], amplitude_columns[0]), "a finite number", amplitudes[bad[0]]
            )
    order = np.argsort(onsets, kind="stable")
    return TaskTiming(
        onsets_s=onsets[order],
        durations_s=durations[order],
        conditions=tuple(conditions[i] for i in order),
        amplitudes=amplitudes[order],
        source=str(path),
    )


def write_events(events: TaskTiming, path: str | Path) -> Path:
    """Write task events as a BIDS ``events.tsv`` (onset, duration, trial_type, amplitude).

    Parameters
    ----------
    events : TaskTiming
        The events; onsets and durations in seconds.
    path : str or Path
        Destination; written under a temporary name, then renamed.
    """
    lines = ["onset\tduration\ttrial_type\tamplitude"]
    for onset, duration, condition, amplitude in zip(
        events.onsets_s, events.durations_s, events.conditions, events.amplitudes, strict=True
    ):
        lines.append(
            f"{format_number(onset)}\t{format_number(duration)}\t{condition}\t"
            f"{format_number(amplitude)}"
        )
    return write_text_atomic(path, "\n".join(lines) + "\n")
