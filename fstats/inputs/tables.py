"""Flow tables (``<stem>_flow.tsv`` / ``.csv``) and auxiliary tables (``<stem>_aux.tsv``).

A flow table has a ``time`` column (s) and one column per channel holding BFi in cm²/s
(or relative flow, baseline 1, when the channel sidecar says ``units = relative``).  The
separator follows the extension (tab for ``.tsv``, comma for ``.csv``) and is checked
against the header.  ``n/a`` or empty cells are missing samples.  The sidecars
``<stem>_channels.tsv`` (required), ``<stem>_events.tsv``, ``<stem>_aux.tsv`` and
``<stem>_flowmask.tsv`` (optional; :mod:`fstats.inputs.masks`) are found by stem.  See
:mod:`fstats.inputs._validate` for what is repaired and what is refused.
"""

from __future__ import annotations

import logging
from pathlib import Path

import numpy as np

from fstats.errors import InputError, suggest
from fstats.inputs._naming import recording_stem, sidecar_path, stem_entities
from fstats.inputs._tabular import (
    SEPARATORS,
    format_number,
    read_numeric,
    separator_for,
    write_text_atomic,
)
from fstats.inputs._validate import check_flow_values, clean_times, fill_missing, regular_grid
from fstats.inputs.channels import read_channel_table, write_channels
from fstats.inputs.events import read_events, write_events
from fstats.inputs.masks import read_flow_mask, recording_exclude_mask, write_flow_mask
from fstats.inputs.recording import (
    FLOW_UNITS,
    SHORT_SEPARATION_THRESHOLD_CM,
    AuxSignal,
    Channel,
    Recording,
    TaskTiming,
)

__all__ = ["read_flow_table", "write_flow_table", "read_aux", "write_aux"]

logger = logging.getLogger(__name__)


def _time_and_columns(path: Path, what: str):
    table = read_numeric(path, what=what, complete=("time",))
    if "time" not in table.header:
        raise InputError(
            path,
            "line 1 (header)",
            f"a 'time' column (s) in {what}",
            list(table.header),
            hint=suggest("time", table.header),
        )
    names = [name for name in table.header if name != "time"]
    if not names:
        raise InputError(path, "line 1 (header)", "at least one column besides 'time'", names)
    times = table.values[:, table.header.index("time")]
    values = table.values[:, [table.header.index(name) for name in names]]
    return table, times, names, values


def _match_channels(
    channels: tuple[Channel, ...], names: list[str], *, path: Path, channels_source: str
) -> tuple[Channel, ...]:
    by_name = {c.name: c for c in channels}
    for name in names:
        if name not in by_name:
            raise InputError(
                channels_source,
                "column 'name'",
                f"a row for every flow column of {path.name}",
                f"no row for {name!r}",
                hint=suggest(name, by_name),
            )
    extra = [c.name for c in channels if c.name not in names]
    if extra:
        raise InputError(
            channels_source,
            "column 'name'",
            f"only channels present in the header of {path.name} ({names})",
            extra,
            hint=suggest(extra[0], names),
        )
    return tuple(by_name[name] for name in names)


def read_flow_table(
    path: str | Path,
    *,
    channels: None | str | Path | tuple[Channel, ...] = None,
    events: None | str | Path | TaskTiming = None,
    aux: None | str | Path = None,
    short_threshold_cm: float = SHORT_SEPARATION_THRESHOLD_CM,
    flow_unit: str | None = None,
) -> Recording:
    """A recording from a flow table and its sidecars.

    Parameters
    ----------
    path : str or Path
        The flow table: ``time`` (s) plus one column per channel (BFi, cm²/s).
    channels : path or tuple of Channel, optional
        Channel descriptions; default ``<stem>_channels.tsv`` beside ``path`` (required).
    events : path or TaskTiming, optional
        Task events; default ``<stem>_events.tsv`` when it exists, else no events.
    aux : path, optional
        Auxiliary signals; default ``<stem>_aux.tsv`` when it exists, else none.
    short_threshold_cm : float, default=1.5
        Channels without an explicit role at or below this separation (cm) are short.
    flow_unit : {"cm2/s", "relative"}, optional
        Unit of the flow columns; overrides the sidecar's ``units`` column.  Default:
        the sidecar's, else ``"cm2/s"``.

    Returns
    -------
    Recording
        On a regular time base; repairs listed in ``provenance["repairs"]`` and NaN runs
        left in place in ``provenance["missing_samples"]`` (channel -> [[start_s, stop_s]]).
        When ``<stem>_flowmask.tsv`` exists beside ``path`` (written by ``fstats
        flowfit``), its 0/1 columns are in ``provenance["flow"]["masks"]["exclude"]``
        (bool, shape (n_times, n_channels), channel order).

    Raises
    ------
    InputError
        One line naming the file and line/column at fault.
    """
    path = Path(path)
    table, times, names, values = _time_and_columns(path, "a flow table")
    if channels is None:
        channels = sidecar_path(path, "channels")
        if not channels.is_file():
            raise InputError(
                channels,
                "file",
                f"a channel sidecar for {path.name}",
                "no such file",
                hint="write it with columns name, separation_cm (tab-separated)",
            )
    declared_unit = None
    if isinstance(channels, str | Path):
        channels_source = str(channels)
        channel_list, declared_unit = read_channel_table(
            channels, short_threshold_cm=short_threshold_cm
        )
    else:
        channels_source, channel_list = "channels argument", tuple(channels)
    channel_list = _match_channels(channel_list, names, path=path, channels_source=channels_source)
    unit = flow_unit or declared_unit or "cm2/s"
    if unit not in FLOW_UNITS:
        raise InputError(
            "flow_unit", "argument", f"one of {list(FLOW_UNITS)}", unit, suggest(unit, FLOW_UNITS)
        )
    if flow_unit and declared_unit and flow_unit != declared_unit:
        logger.info("%s: flow unit %r overrides the sidecar's %r", path, flow_unit, declared_unit)

    def where(row: int) -> str:
        return f"line {table.lines[row]}"

    check_flow_values(values, unit, names, path=str(path), where=where)
    repairs: list[dict] = []
    times, values, rows = clean_times(times, values, path=str(path), where=where, repairs=repairs)
    times, values, rows = regular_grid(
        times, values, rows, path=str(path), where=where, repairs=repairs
    )
    values, kept = fill_missing(
        times, values, rows, names, path=str(path), where=where, repairs=repairs
    )
    step = float(np.median(np.diff(times)))
    files = {"flow": str(path), "channels": channels_source}
    if events is None and sidecar_path(path, "events").is_file():
        events = sidecar_path(path, "events")
    if isinstance(events, str | Path):
        files["events"] = str(events)
        events = read_events(
            events,
            recording_duration_s=float(times[-1] - times[0] + step),
            recording_start_s=float(times[0]),
        )
    if aux is None and sidecar_path(path, "aux").is_file():
        aux = sidecar_path(path, "aux")
    aux_signals = {}
    if aux is not None:
        files["aux"] = str(aux)
        aux_signals = read_aux(aux)
    provenance = {"repairs": repairs, "missing_samples": kept, "files": files}
    mask_path = sidecar_path(path, "flowmask")
    if mask_path.is_file():
        files["flowmask"] = str(mask_path)
        exclude = read_flow_mask(mask_path, times, [c.name for c in channel_list])
        provenance["flow"] = {"masks": {"exclude": exclude}}
    subject, session = stem_entities(recording_stem(path))
    return Recording(
        times_s=times,
        flow=values,
        channels=channel_list,
        flow_unit=unit,
        events=events,
        aux=aux_signals,
        source=str(path),
        subject=subject,
        session=session,
        provenance=provenance,
    )


def read_aux(path: str | Path) -> dict[str, AuxSignal]:
    """Auxiliary signals from an ``aux.tsv`` table: ``time`` (s) plus one column per signal.

    Parameters
    ----------
    path : str or Path
        The table (tab- or comma-separated by extension).  Sampling need not be
        regular, but times must increase; exact duplicate rows are dropped with a warning.

    Returns
    -------
    dict of str to AuxSignal
        One signal per column (unit ``"a.u."``), in column order.
    """
    path = Path(path)
    table, times, names, values = _time_and_columns(path, "auxiliary signals")
    if np.isinf(values).any():
        row, column = np.argwhere(np.isinf(values))[0]
        raise InputError(
            path, f"line {table.lines[row]}, column {names[column]!r}", "a finite value", "inf"
        )
    repairs: list[dict] = []
    times, values, _ = clean_times(
        times, values, path=str(path), where=lambda r: f"line {table.lines[r]}", repairs=repairs
    )
    return {
        name: AuxSignal(name=name, times_s=times.copy(), values=values[:, i].copy())
        for i, name in enumerate(names)
    }


def _write_table(path: Path, times: np.ndarray, columns: dict[str, np.ndarray]) -> Path:
    sep = separator_for(path)
    for name in columns:
        if sep in name or "\n" in name:
            raise ValueError(f"column name {name!r} contains the separator")
    lines = [sep.join(["time", *columns])]
    stacked = np.column_stack([times, *columns.values()])
    lines.extend(sep.join(format_number(v) for v in row) for row in stacked.tolist())
    return write_text_atomic(path, "\n".join(lines) + "\n")


def write_aux(aux: dict[str, AuxSignal], path: str | Path) -> Path:
    """Write auxiliary signals sharing one time base as an ``aux.tsv`` table.

    Raises
    ------
    ValueError
        When the signals have different sample times (write SNIRF instead).
    """
    times = _shared_aux_times(aux)
    return _write_table(Path(path), times, {s.name: s.values for s in aux.values()})


def _shared_aux_times(aux: dict[str, AuxSignal]) -> np.ndarray:
    signals = list(aux.values())
    for signal in signals[1:]:
        if not np.array_equal(signal.times_s, signals[0].times_s):
            raise ValueError("auxiliary signals have different time bases; write SNIRF instead")
    return signals[0].times_s


def write_flow_table(recording: Recording, path: str | Path) -> Path:
    """Write a recording as a flow table plus its sidecars, all sharing the file's stem.

    Writes ``path`` (``time`` + one column per channel; TSV or CSV by extension),
    ``<stem>_channels.tsv``, and, when present, ``<stem>_events.tsv``,
    ``<stem>_aux.tsv`` and ``<stem>_flowmask.tsv`` (from
    ``provenance["flow"]["masks"]["exclude"]``).  Numbers are written with full precision
    so that reading back gives identical arrays.  Raw g2 curves and count rates are not written (use
    :func:`~fstats.inputs.snirf_writer.write_snirf`).
    Each file is written under a temporary name and then renamed.

    Parameters
    ----------
    recording : Recording
        The recording.
    path : str or Path
        Flow table to write, e.g. ``sub-01/sub-01_task-subtract_flow.tsv``.

    Returns
    -------
    Path
        The flow table's path.
    """
    path = Path(path)
    if path.suffix.lower() not in SEPARATORS:
        raise ValueError(f"flow table must end in .tsv or .csv, got {path.name!r}")
    if recording.aux:
        _shared_aux_times(recording.aux)  # refuse before writing anything
    exclude = recording_exclude_mask(recording)
    if recording.g2 is not None or recording.count_rate_hz is not None:
        logger.info(
            "%s: g2 curves and count rates are not written to flow tables; use write_snirf", path
        )
    write_channels(
        recording.channels, sidecar_path(path, "channels"), flow_unit=recording.flow_unit
    )
    if recording.events is not None:
        write_events(recording.events, sidecar_path(path, "events"))
    if recording.aux:
        write_aux(recording.aux, sidecar_path(path, "aux"))
    if exclude is not None:
        write_flow_mask(
            recording.times_s, recording.channel_names, exclude, sidecar_path(path, "flowmask")
        )
    columns = {name: recording.flow[:, i] for i, name in enumerate(recording.channel_names)}
    return _write_table(path, recording.times_s, columns)
