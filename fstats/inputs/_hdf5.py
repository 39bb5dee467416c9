"""Low-level SNIRF (HDF5) helpers: numbered groups, texts, stim and aux groups."""

from __future__ import annotations

import re
from pathlib import Path

import h5py
import numpy as np

from fstats.errors import InputError, suggest
from fstats.inputs._validate import clean_times
from fstats.inputs.channels import MAX_SEPARATION_CM
from fstats.inputs.events import check_event_times
from fstats.inputs.recording import AuxSignal, Channel, TaskTiming

#: metaDataTags entry (ours) listing the short-separation channels, joined by ";".
SHORT_CHANNELS_TAG = "fstats_short_channels"

__all__ = [
    "numbered",
    "text",
    "texts",
    "dataset",
    "integer",
    "unit_factor",
    "positions",
    "time_base",
    "probe_channels",
    "SHORT_CHANNELS_TAG",
    "read_stims",
    "read_aux_groups",
]


def numbered(group: h5py.Group, prefix: str) -> list[str]:
    pattern = re.compile(rf"^{prefix}(\d+)$")
    keys = [(int(m.group(1)), k) for k in group if (m := pattern.match(k))]
    return [k for _, k in sorted(keys)]


def text(value) -> str:
    if isinstance(value, np.ndarray):
        value = value.reshape(-1)[0] if value.size else ""
    return value.decode("utf-8") if isinstance(value, bytes) else str(value)


def texts(dataset) -> list[str]:
    return [text(v) for v in np.atleast_1d(dataset[()])]


def dataset(path: Path, group: h5py.Group, name: str, what: str):
    found = group.get(name)
    if not isinstance(found, h5py.Dataset):
        raise InputError(path, f"{group.name}/{name}", what, "missing")
    return found


def integer(path: Path, group: h5py.Group, name: str, default: int | None = None) -> int:
    """A scalar integer dataset; ``default`` when absent (refused when no default).

    Read through h5py's low-level API: SNIRF files with g2 curves hold thousands of
    these small datasets, and the high-level objects cost about three times as much.
    """
    try:
        handle = h5py.h5d.open(group.id, name.encode())
    except (KeyError, ValueError, TypeError):
        if default is not None:
            return default
        raise InputError(path, f"{group.name}/{name}", "an integer", "missing") from None
    value = np.empty(handle.shape, dtype=np.float64)
    handle.read(h5py.h5s.ALL, h5py.h5s.ALL, value)
    value = value.reshape(-1)
    if value.size != 1 or not np.isfinite(value[0]) or value[0] != int(value[0]):
        raise InputError(path, f"{group.name}/{name}", "one integer", value.tolist())
    return int(value[0])


def unit_factor(path: Path, meta: h5py.Group | None, tag: str, table: dict, default: str) -> float:
    if meta is None or tag not in meta:
        return table[default]
    unit = text(meta[tag][()])
    if unit not in table:
        raise InputError(
            path, f"{meta.name}/{tag}", f"one of {list(table)}", unit, suggest(unit, table)
        )
    return table[unit]


def positions(path: Path, probe: h5py.Group, kind: str) -> np.ndarray:
    for name in (f"{kind}Pos3D", f"{kind}Pos2D"):
        if name in probe:
            return np.atleast_2d(np.asarray(probe[name][()], dtype=float))
    raise InputError(path, f"{probe.name}/{kind}Pos3D", f"{kind} positions", "missing")


def time_base(path: Path, data: h5py.Group, n_times: int, to_s: float) -> np.ndarray:
    time = np.asarray(dataset(path, data, "time", "sample times")[()], dtype=float).reshape(-1)
    if time.size == 2 and n_times != 2:
        time = time[0] + time[1] * np.arange(n_times)
    if time.size != n_times:
        raise InputError(
            path,
            f"{data.name}/time",
            f"{n_times} sample times (one per row of dataTimeSeries)",
            f"{time.size} values",
        )
    return time * to_s


def probe_channels(path, probe, meta, keys, to_cm, short_threshold_cm):
    """Channel keys (source, detector, wavelength) and Channel objects from the probe."""
    dcs = sorted((k for k in keys if k[0] != "count rate"), key=lambda k: k[0] != "BFi")
    channel_keys = list(dict.fromkeys(k[1] for k in dcs))
    sources, detectors = positions(path, probe, "source"), positions(path, probe, "detector")
    wavelengths = (
        np.asarray(probe["wavelengths"][()], dtype=float).reshape(-1)
        if "wavelengths" in probe
        else np.array([np.nan])
    )
    labels = texts(probe["detectorLabels"]) if "detectorLabels" in probe else []
    names = []
    for s, d, w in channel_keys:
        for index, table, what in (
            (s, sources, "sourceIndex"),
            (d, detectors, "detectorIndex"),
            (w, wavelengths, "wavelengthIndex"),
        ):
            if not 1 <= index <= len(table):
                raise InputError(path, f"measurementList {what}", f"1..{len(table)}", index)
        names.append(labels[d - 1] if len(labels) >= d else f"S{s}-D{d}")
    if len(set(names)) < len(names):
        names = [f"S{s}-D{d}-W{w}" for s, d, w in channel_keys]
    short = None
    if meta is not None and SHORT_CHANNELS_TAG in meta:
        short = {n for n in text(meta[SHORT_CHANNELS_TAG][()]).split(";") if n}
    channels = []
    for name, (s, d, w) in zip(names, channel_keys, strict=True):
        dims = min(sources.shape[1], detectors.shape[1])
        distance = np.linalg.norm(sources[s - 1, :dims] - detectors[d - 1, :dims]) * to_cm
        separation = round(float(distance), 6)
        if not 0 < separation <= MAX_SEPARATION_CM:
            raise InputError(
                path,
                f"{probe.name}/detectorPos3D",
                f"detector {d} 0-{MAX_SEPARATION_CM:g} cm from source {s}",
                f"{separation:g} cm",
                hint="check metaDataTags/LengthUnit" if separation else None,
            )
        wavelength = float(wavelengths[w - 1])
        channels.append(
            Channel(
                name=name,
                separation_cm=separation,
                is_short=(name in short) if short is not None else separation <= short_threshold_cm,
                wavelength_nm=wavelength if np.isfinite(wavelength) else None,
            )
        )
    return channel_keys, tuple(channels)


def read_stims(path: Path, nirs: h5py.Group, start_s: float, end_s: float) -> TaskTiming | None:
    onsets, durations, amplitudes, conditions, wheres = [], [], [], [], []
    groups = numbered(nirs, "stim")
    for name in groups:
        stim = nirs[name]
        condition = text(dataset(path, stim, "name", "a condition name")[()])
        data = np.asarray(
            dataset(path, stim, "data", "rows [onset, duration, amplitude]")[()], dtype=float
        )
        if data.size == 0:
            continue
        data = data.reshape(1, -1) if data.ndim == 1 else data
        if data.ndim != 2 or data.shape[1] < 3:
            raise InputError(
                path,
                f"{stim.name}/data",
                "rows [onset, duration, amplitude]",
                f"shape {data.shape}",
            )
        for row in range(data.shape[0]):
            onsets.append(data[row, 0])
            durations.append(data[row, 1])
            amplitudes.append(data[row, 2])
            conditions.append(condition)
            wheres.append(f"{stim.name}/data, row {row + 1}")
    if not groups:
        return None
    onsets, durations = np.array(onsets, dtype=float), np.array(durations, dtype=float)
    check_event_times(
        onsets,
        durations,
        path=str(path),
        start_s=start_s,
        end_s=end_s,
        where=lambda i, field: f"{wheres[i]}, column {field!r}",
    )
    order = np.argsort(onsets, kind="stable")
    return TaskTiming(
        onsets_s=onsets[order],
        durations_s=durations[order],
        conditions=tuple(conditions[i] for i in order),
        amplitudes=np.array(amplitudes, dtype=float)[order],
        source=f"{path}:{nirs.name}/stim",
    )


def read_aux_groups(path: Path, nirs: h5py.Group, to_s: float) -> dict[str, AuxSignal]:
    signals = {}
    for group_name in numbered(nirs, "aux"):
        group = nirs[group_name]
        name = text(dataset(path, group, "name", "a signal name")[()])
        values = np.asarray(
            dataset(path, group, "dataTimeSeries", "signal values")[()], dtype=float
        ).reshape(-1)
        times = (
            np.asarray(dataset(path, group, "time", "sample times")[()], dtype=float).reshape(-1)
            * to_s
        )
        if times.size != values.size:
            raise InputError(
                path, f"{group.name}/time", f"{values.size} sample times", f"{times.size}"
            )
        if "timeOffset" in group:
            times = times + float(np.asarray(group["timeOffset"][()]).reshape(-1)[0]) * to_s
        times, kept, _ = clean_times(
            times,
            values[:, None],
            path=str(path),
            repairs=[],
            where=lambda r, g=group: f"{g.name}/time, sample {r + 1}",
        )
        unit = text(group["dataUnit"][()]) if "dataUnit" in group else "a.u."
        signals[name] = AuxSignal(name=name, times_s=times, values=kept[:, 0], unit=unit or "a.u.")
    return signals
