"""Checks and safe repairs of a time series at the input boundary.

What is refused and what is repaired (repairs are logged, raised as
:class:`~fstats.errors.InputRepairWarning` and listed in ``Recording.provenance["repairs"]``):

=============================================  ===========================================
problem                                        action
=============================================  ===========================================
non-finite time stamp                          refused (line named)
exact duplicate rows (same time, same values)  repeated rows dropped
same time stamp, different values              refused (both lines named)
time stamps that go back or stand still        refused (line named)
jitter below ``EXACT_STEP_TOLERANCE`` of step  ignored (times kept as written)
jitter up to ``JITTER_TOLERANCE`` of the step  values linearly interpolated onto the
                                               regular grid ``t0 + k * step``
a step of a whole number of steps (+-5 %)      missing samples inserted as NaN
any other step                                 refused (line named)
median step > 1 / ``MIN_SAMPLING_RATE_HZ``     refused (time column not in seconds)
NaN run <= ``MAX_INTERPOLATED_GAP_S``          linearly interpolated (interior runs only)
longer NaN run, or NaN at the edges            kept as NaN; runs listed in
                                               ``provenance["missing_samples"]``
more than ``MAX_MISSING_FRACTION`` missing     refused (channel and first line named)
infinite value, BFi <= 0                       refused (line and column named)
median outside the plausible range of the      refused, with a hint about the unit
declared unit (``PLAUSIBLE_MEDIAN``)
=============================================  ===========================================

Later stages receive NaN only for the long runs kept above; they must mask them.
"""

from __future__ import annotations

import logging
import warnings
from collections.abc import Callable, Sequence

import numpy as np

from fstats.errors import InputError, InputRepairWarning

__all__ = [
    "EXACT_STEP_TOLERANCE",
    "JITTER_TOLERANCE",
    "MAX_INTERPOLATED_GAP_S",
    "MAX_MISSING_FRACTION",
    "MIN_SAMPLING_RATE_HZ",
    "PLAUSIBLE_MEDIAN",
    "note_repair",
    "clean_times",
    "regular_grid",
    "fill_missing",
    "check_flow_values",
]

logger = logging.getLogger(__name__)

#: Deviations from a regular grid below this fraction of the step are rounding in the file.
EXACT_STEP_TOLERANCE: float = 1e-6
#: Sample times within this fraction of a step from the regular grid are snapped onto it.
JITTER_TOLERANCE: float = 0.05
#: Interior NaN runs up to this length (s) are linearly interpolated.
MAX_INTERPOLATED_GAP_S: float = 0.5
#: A channel with a larger fraction of missing samples is refused.
MAX_MISSING_FRACTION: float = 0.5
#: Slower sampling is refused as a time column in the wrong unit (DCS runs at 1-100 Hz).
MIN_SAMPLING_RATE_HZ: float = 0.2
#: Plausible range of a channel's median flow, per flow unit.  Adult brain BFi is about
#: 1e-8 cm²/s (0.5-3e-8; muscle and scalp lower); 1e-6 catches BFi written in mm²/s
#: (x100) and BFi scaled by 1e8; relative flow has baseline 1.
PLAUSIBLE_MEDIAN: dict[str, tuple[float, float]] = {
    "cm2/s": (1e-11, 1e-6),
    "relative": (0.1, 10.0),
}

RowLabel = Callable[[int], str]


def note_repair(repairs: list[dict], kind: str, message: str, **details) -> None:
    """Record a repair in ``repairs``, log it and issue an InputRepairWarning."""
    repairs.append({"kind": kind, "message": message, **details})
    logger.warning(message)
    warnings.warn(message, InputRepairWarning, stacklevel=3)


def clean_times(
    times: np.ndarray,
    values: np.ndarray,
    *,
    path: str,
    where: RowLabel,
    repairs: list[dict],
    field: str = "time",
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Refuse bad time stamps and drop exact duplicate rows.

    Parameters
    ----------
    times : ndarray, shape (n_rows,)
        Sample times in seconds as read.
    values : ndarray, shape (n_rows, n_columns)
        Values of each row.
    path : str
        File named in errors.
    where : callable
        Row index -> location text (``"line 14"``).
    repairs : list of dict
        Repairs made are appended here.

    Returns
    -------
    times, values : ndarray
        With repeated rows removed.
    rows : ndarray of int
        Original row index of each kept row.
    """
    bad = np.flatnonzero(~np.isfinite(times))
    if bad.size:
        raise InputError(path, f"{where(bad[0])}, column {field!r}", "a time in s", times[bad[0]])
    rows = np.arange(times.size)
    same = np.flatnonzero(np.diff(times) == 0)
    if same.size:
        for i in same:
            a, b = values[i], values[i + 1]
            if not np.array_equal(a, b, equal_nan=True):
                raise InputError(
                    path,
                    f"{where(i + 1)}, column {field!r}",
                    f"one sample per time stamp (a repeat must hold the same values as {where(i)})",
                    f"time {float(times[i + 1])!r} s repeated with different values",
                )
        keep = np.ones(times.size, dtype=bool)
        keep[same + 1] = False
        note_repair(
            repairs,
            "duplicate_rows_dropped",
            f"{path}: dropped {same.size} repeated row(s) with a duplicated time stamp "
            f"(first at {where(same[0] + 1)}, time {float(times[same[0]])!r} s)",
            n_rows=int(same.size),
        )
        times, values, rows = times[keep], values[keep], rows[keep]
    back = np.flatnonzero(np.diff(times) <= 0)
    if back.size:
        i = back[0] + 1
        raise InputError(
            path,
            f"{where(rows[i])}, column {field!r}",
            f"times increasing from the previous sample ({float(times[i - 1])!r} s)",
            float(times[i]),
        )
    return times, values, rows


def _interpolate(x: np.ndarray, xp: np.ndarray, fp: np.ndarray) -> np.ndarray:
    """Linear interpolation, extended linearly (not held) beyond the first/last sample."""
    y = np.interp(x, xp, fp)
    before, after = x < xp[0], x > xp[-1]
    y[before] = fp[0] + (x[before] - xp[0]) * (fp[1] - fp[0]) / (xp[1] - xp[0])
    y[after] = fp[-1] + (x[after] - xp[-1]) * (fp[-1] - fp[-2]) / (xp[-1] - xp[-2])
    return y


def regular_grid(
    times: np.ndarray,
    values: np.ndarray,
    rows: np.ndarray,
    *,
    path: str,
    where: RowLabel,
    repairs: list[dict],
    field: str = "time",
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Put strictly increasing samples on a regular time grid, or refuse.

    Returns
    -------
    times : ndarray, shape (n_grid,)
        Regular sample times in seconds (as written when already regular).
    values : ndarray, shape (n_grid, n_columns)
        Values on the grid; samples missing from the file are NaN.
    rows : ndarray of int, shape (n_grid,)
        Original row index of each grid sample (-1 where a sample was missing).
    """
    if times.size < 3:
        raise InputError(path, f"column {field!r}", "at least 3 samples", int(times.size))
    steps = np.diff(times)
    step = float(np.median(steps))
    if step > 1.0 / MIN_SAMPLING_RATE_HZ:
        raise InputError(
            path,
            f"column {field!r}",
            f"times in seconds (a sampling rate of at least {MIN_SAMPLING_RATE_HZ:g} Hz)",
            f"a median step of {step:.6g}",
            hint="values look like milliseconds; convert the time column to seconds",
        )
    ratio = steps / step
    counts = np.rint(ratio)
    bad = np.flatnonzero((counts < 1) | (np.abs(ratio - counts) > JITTER_TOLERANCE))
    if bad.size:
        i = bad[0] + 1
        raise InputError(
            path,
            f"{where(rows[i])}, column {field!r}",
            f"a regular time step of {step:.6g} s (within {JITTER_TOLERANCE:.0%}, or a whole "
            "number of steps for missing samples)",
            f"a step of {steps[i - 1]:.6g} s",
        )
    index = np.concatenate([[0], np.cumsum(counts.astype(int))])
    n_grid = int(index[-1]) + 1
    # step by least squares through the first sample: robust to rounded time stamps
    step = float(index @ (times - times[0]) / (index @ index))
    grid = times[0] + step * np.arange(n_grid)
    deviation = np.abs(times - grid[index]) / step
    worst = int(np.argmax(deviation))
    if deviation[worst] > JITTER_TOLERANCE:
        raise InputError(
            path,
            f"{where(rows[worst])}, column {field!r}",
            f"sample times within {JITTER_TOLERANCE:.0%} of a step from a regular grid "
            f"(step {step:.6g} s)",
            f"a time {deviation[worst]:.0%} of a step off the grid",
        )
    if n_grid == times.size and deviation[worst] <= EXACT_STEP_TOLERANCE:
        return times, values, rows  # already regular: nothing to copy
    out = np.full((n_grid, values.shape[1]), np.nan)
    out_rows = np.full(n_grid, -1, dtype=int)
    out_rows[index] = rows
    if deviation[worst] > EXACT_STEP_TOLERANCE:
        for column in range(values.shape[1]):
            out[index, column] = _interpolate(grid[index], times, values[:, column])
        out_times = grid
        note_repair(
            repairs,
            "jitter_resampled",
            f"{path}: sample times jitter up to {deviation[worst]:.1%} of the {step:.6g} s step; "
            "values linearly interpolated onto a regular grid",
            max_jitter_fraction=float(deviation[worst]),
        )
    else:
        out[index] = values
        out_times = grid.copy()
        out_times[index] = times
    if n_grid > times.size:
        note_repair(
            repairs,
            "missing_samples_inserted",
            f"{path}: {n_grid - times.size} sample(s) missing from the time base (first after "
            f"{where(rows[int(np.argmax(counts > 1))])}); inserted as NaN",
            n_samples=int(n_grid - times.size),
        )
    return out_times, out, out_rows


def _nan_runs(missing: np.ndarray) -> list[tuple[int, int]]:
    """Start and stop (exclusive) indices of runs of True."""
    padded = np.concatenate([[False], missing, [False]])
    edges = np.flatnonzero(np.diff(padded.astype(int)))
    return list(zip(edges[::2].tolist(), edges[1::2].tolist(), strict=True))


def fill_missing(
    times: np.ndarray,
    values: np.ndarray,
    rows: np.ndarray,
    names: Sequence[str],
    *,
    path: str,
    where: RowLabel,
    repairs: list[dict],
) -> tuple[np.ndarray, dict[str, list[list[float]]]]:
    """Interpolate short interior NaN runs; keep long ones; refuse mostly missing channels.

    Parameters
    ----------
    times : ndarray, shape (n_times,)
        Regular sample times in seconds.
    values : ndarray, shape (n_times, n_channels)
        Values with NaN for missing samples (not modified).
    rows : ndarray of int, shape (n_times,)
        Original row of each sample, -1 for inserted ones (for error locations).
    names : sequence of str
        Channel names, for messages.

    Returns
    -------
    values : ndarray, shape (n_times, n_channels)
        A copy with short runs interpolated.
    kept : dict of str to list of [start_s, stop_s]
        The NaN runs left in place, per channel (only channels that have some).
    """
    values = values.copy()
    step = float(np.median(np.diff(times)))
    kept: dict[str, list[list[float]]] = {}
    for column, name in enumerate(names):
        missing = np.isnan(values[:, column])
        if not missing.any():
            continue
        runs = _nan_runs(missing)
        fraction = missing.mean()
        if fraction > MAX_MISSING_FRACTION:
            start, stop = max(runs, key=lambda run: run[1] - run[0])
            observed = rows[start] if rows[start] >= 0 else rows[max(start - 1, 0)]
            raise InputError(
                path,
                f"column {name!r} (longest gap from {where(observed)})",
                f"at most {MAX_MISSING_FRACTION:.0%} missing samples",
                f"{fraction:.0%} missing",
            )
        filled = 0
        for start, stop in runs:
            length_s = (stop - start) * step
            interior = start > 0 and stop < times.size
            if interior and length_s <= MAX_INTERPOLATED_GAP_S + 1e-9 * step:
                span = slice(start - 1, stop + 1)
                values[start:stop, column] = np.interp(
                    times[start:stop], times[span][[0, -1]], values[span, column][[0, -1]]
                )
                filled += stop - start
            else:
                kept.setdefault(name, []).append(
                    [float(times[start]), float(times[start] + (stop - start) * step)]
                )
        if filled:
            note_repair(
                repairs,
                "short_gaps_interpolated",
                f"{path}: channel {name!r}: {filled} missing sample(s) in gaps of at most "
                f"{MAX_INTERPOLATED_GAP_S} s linearly interpolated",
                channel=name,
                n_samples=int(filled),
            )
        if name in kept:
            total = sum(stop - start for start, stop in kept[name])
            logger.warning(
                "%s: channel %r keeps %d gap(s) of missing samples (%.3g s in all) as NaN",
                path,
                name,
                len(kept[name]),
                total,
            )
    return values, kept


def _unit_hint(median: float, flow_unit: str) -> str:
    if flow_unit == "cm2/s":
        if 1e-6 <= median < 1e-3:
            return "values look like BFi in mm²/s (1 mm²/s = 0.01 cm²/s); convert to cm²/s"
        if 0.1 <= median <= 10.0:
            return (
                "values look like relative flow (baseline 1) or BFi scaled by 1e8; set units to "
                "'relative' in channels.tsv (or flow_unit='relative'), or rescale to cm²/s"
            )
        return "check the unit of the flow values (BFi in cm²/s, or set units to 'relative')"
    if 1e-11 <= median < 1e-6:
        return "values look like BFi in cm²/s; set units to 'cm2/s' in channels.tsv"
    return "relative flow should have a baseline near 1; check the unit"


def check_flow_values(
    values: np.ndarray,
    flow_unit: str,
    names: Sequence[str],
    *,
    path: str,
    where: RowLabel,
    where_column: Callable[[int], str] | None = None,
) -> None:
    """Refuse infinite or non-positive flow and medians implausible for the unit.

    Parameters
    ----------
    values : ndarray, shape (n_rows, n_channels)
        Flow as read (NaN = missing), BFi in cm²/s or relative flow.
    flow_unit : {"cm2/s", "relative"}
        Declared unit.
    names : sequence of str
        Channel names in column order.
    where : callable
        Row index -> location text.
    where_column : callable, optional
        Column index -> location text (default ``"column '<name>'"``).
    """
    where_column = where_column or (lambda c: f"column {names[c]!r}")
    quantity = "BFi in cm²/s" if flow_unit == "cm2/s" else "relative flow"
    bad = np.isinf(values) | (values <= 0)
    if bad.any():
        row, column = np.argwhere(bad)[0]
        raise InputError(
            path,
            f"{where(row)}, {where_column(column)}",
            f"{quantity} > 0",
            float(values[row, column]),
            hint="write samples of failed g2 fits as 'n/a' (missing)",
        )
    low, high = PLAUSIBLE_MEDIAN[flow_unit]
    for column in range(values.shape[1]):
        finite = values[:, column][~np.isnan(values[:, column])]
        if finite.size == 0:
            continue
        median = float(np.median(finite))
        if not low <= median <= high:
            raise InputError(
                path,
                where_column(column),
                f"{quantity} with a median in {low:g}..{high:g}",
                f"median {median:.3g}",
                hint=_unit_hint(median, flow_unit),
            )
