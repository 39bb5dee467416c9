"""Per-sample exclusion masks beside a flow table: ``<stem>_flowmask.tsv``.

``fstats flowfit`` writes this sidecar next to the flow it fitted from g2 curves: a
tab-separated table with a ``time`` column (s, the flow table's sample times) and one column
per channel holding ``1`` for a sample to exclude or down-weight (bad curve, poor fit, low
count rate, motion) and ``0`` otherwise.  :func:`~fstats.inputs.tables.read_flow_table` and
:func:`~fstats.inputs.snirf.read_snirf` read it, when present beside the data file, into
``Recording.provenance["flow"]["masks"]["exclude"]``; the writers write it from there.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from fstats.errors import InputError, suggest
from fstats.inputs._tabular import read_numeric, write_text_atomic
from fstats.inputs.recording import Recording

__all__ = ["read_flow_mask", "recording_exclude_mask", "write_flow_mask"]


def read_flow_mask(
    path: str | Path, times_s: np.ndarray, channel_names: tuple[str, ...] | list[str]
) -> np.ndarray:
    """The exclusion mask of a flow table, checked against the table's times and channels.

    Parameters
    ----------
    path : str or Path
        The ``<stem>_flowmask.tsv`` sidecar: ``time`` (s) + one 0/1 column per channel.
    times_s : ndarray, shape (n_times,)
        Sample times of the flow (s); the mask must have one row per sample at the same
        time (within a quarter of the sample step).
    channel_names : sequence of str, length n_channels
        The flow's channels; the mask must have exactly these columns (in any order).

    Returns
    -------
    ndarray of bool, shape (n_times, n_channels)
        True where a sample is to be excluded, columns in ``channel_names`` order.

    Raises
    ------
    InputError
        One line naming the mask file and the line/column at fault.
    """
    path = Path(path)
    times_s = np.asarray(times_s, dtype=float)
    names = list(channel_names)
    expected_header = ["time", *names]
    table = read_numeric(path, what="a flow mask", complete=tuple(expected_header))
    if set(table.header) != set(expected_header):
        missing = [n for n in expected_header if n not in table.header]
        extra = [n for n in table.header if n not in expected_header]
        hint = suggest(extra[0], expected_header) if extra else None
        raise InputError(
            path,
            "line 1 (header)",
            f"'time' and the flow table's channels {names}",
            list(table.header),
            hint=hint or (f"missing {missing}" if missing else None),
        )
    times = table.values[:, table.header.index("time")]
    flags = table.values[:, [table.header.index(name) for name in names]]
    if times.size != times_s.size:
        # the first surplus row, or the line after the last row when rows are missing
        surplus = times.size > times_s.size
        line = int(table.lines[times_s.size]) if surplus else int(table.lines[-1]) + 1
        raise InputError(
            path,
            f"line {line}",
            f"{times_s.size} rows, one per flow sample",
            f"{times.size} rows",
        )
    step = float(np.median(np.diff(times_s))) if times_s.size > 1 else 1.0
    off = np.flatnonzero(~(np.abs(times - times_s) <= 0.25 * step))
    if off.size:
        row = int(off[0])
        raise InputError(
            path,
            f"line {table.lines[row]}, column 'time'",
            f"the flow sample time {float(times_s[row])!r} s",
            float(times[row]),
        )
    bad = np.argwhere((flags != 0) & (flags != 1))
    if bad.size:
        row, column = bad[0]
        raise InputError(
            path,
            f"line {table.lines[row]}, column {names[column]!r}",
            "0 (keep) or 1 (exclude)",
            float(flags[row, column]),
        )
    return flags == 1


def write_flow_mask(
    times_s: np.ndarray,
    channel_names: tuple[str, ...] | list[str],
    exclude: np.ndarray,
    path: str | Path,
) -> Path:
    """Write an exclusion mask as ``<stem>_flowmask.tsv`` (read by :func:`read_flow_mask`).

    Parameters
    ----------
    times_s : ndarray, shape (n_times,)
        Sample times (s).
    channel_names : sequence of str, length n_channels
        Column names.
    exclude : ndarray of bool, shape (n_times, n_channels)
        True where a sample is to be excluded or down-weighted.
    path : str or Path
        Destination; written under a temporary name, then renamed.

    Returns
    -------
    Path
        ``path``.
    """
    exclude = np.asarray(exclude, dtype=bool)
    lines = ["\t".join(["time", *channel_names])]
    lines.extend(
        "\t".join([repr(float(t)), *("1" if x else "0" for x in row)])
        for t, row in zip(np.asarray(times_s, dtype=float), exclude.tolist(), strict=True)
    )
    return write_text_atomic(path, "\n".join(lines) + "\n")


def recording_exclude_mask(recording: Recording) -> np.ndarray | None:
    """A recording's ``provenance["flow"]["masks"]["exclude"]`` as bool, or None.

    Raises
    ------
    ValueError
        When the mask's shape is not the flow's (n_times, n_channels).
    """
    flow_prov = recording.provenance.get("flow")
    masks = flow_prov.get("masks") if isinstance(flow_prov, dict) else None
    exclude = masks.get("exclude") if isinstance(masks, dict) else None
    if exclude is None:
        return None
    exclude = np.asarray(exclude)
    if exclude.shape != recording.flow.shape:
        raise ValueError(
            f"provenance['flow']['masks']['exclude'] has shape {exclude.shape}, "
            f"the flow {recording.flow.shape}"
        )
    return exclude.astype(bool)
