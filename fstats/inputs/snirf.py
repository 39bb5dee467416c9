"""SNIRF (HDF5) files holding DCS data: BFi (dataType 410) and g2 curves (dataType 401).

Layout read and written (SNIRF 1.1 names; one ``/nirs`` group):

``/formatVersion``
    ``"1.1"`` on writing; required on reading.
``/nirs/metaDataTags``
    ``LengthUnit`` (``mm`` usually; also ``cm``, ``m``), ``TimeUnit`` (``s``, ``ms``, ``us``),
    ``SubjectID``; fstats adds ``fstats_short_channels``, the short-separation channel names
    joined by ``;`` (when absent, roles follow the separation threshold).
``/nirs/data1/dataTimeSeries`` (n_times, n_measurements), ``/nirs/data1/time`` (n_times,)
    ``time`` may also be the two-value form ``[start, step]``.  Further ``data2``, ...
    groups must share the time base.
``/nirs/data1/measurementList{k}``
    ``sourceIndex``, ``detectorIndex``, ``wavelengthIndex`` (1-based), ``dataType``,
    ``dataTypeLabel``, ``dataTypeIndex`` and ``dataUnit``.  Column ``k - 1`` of
    ``dataTimeSeries`` is described by ``measurementList{k}``.
``/nirs/probe``
    ``sourcePos3D``/``detectorPos3D`` (or the ``2D`` forms) in ``LengthUnit``: a channel's
    separation is the distance between its source and detector, converted to cm and
    rounded to 1e-6 cm.  ``wavelengths`` (nm; NaN when unknown), ``detectorLabels`` (used as
    channel names when unique), ``correlationTimeDelays`` (lags of g2, in ``TimeUnit``).
``/nirs/stim{k}``
    ``name`` (condition) and ``data`` rows ``[onset, duration, amplitude]`` in s: task events.
``/nirs/aux{k}``
    ``name``, ``dataTimeSeries``, ``time`` (+ ``timeOffset``), optional ``dataUnit``.

A channel is one (source, detector, wavelength) triple.  Its BFi series is the one
measurement with ``dataType`` 410 (``dataUnit`` ``cm2/s``, ``mm2/s`` - converted - or
``relative``).  Its g2 curve is stored as one measurement per lag: ``dataType`` 401 with
``dataTypeIndex`` = ``j`` (1-based) meaning lag ``probe/correlationTimeDelays[j - 1]``;
the writer orders them channel by channel, lag by lag, after the BFi columns.  Detector
count rates (photons per second, the detected intensity) are stored as dataType 1
(continuous-wave amplitude) with ``dataUnit`` ``Hz`` for the same channel, last.  Measurements
of other data types are ignored with a log message; a file with none of 401/410 is refused.
A file with g2 but no BFi gives a Recording whose flow is all NaN
(``provenance["flow_missing"] = True``) for the flow stage to fill; the writer writes such
a g2-only file for a recording whose flow is all NaN.  A ``<stem>_flowmask.tsv`` beside a
file with BFi is read into ``provenance["flow"]["masks"]["exclude"]``
(:mod:`fstats.inputs.masks`).  Time stamps and
values pass the checks of :mod:`fstats.inputs._validate`.
"""

from __future__ import annotations

import logging
from pathlib import Path

import h5py
import numpy as np

from fstats.errors import InputError, suggest
from fstats.inputs._hdf5 import (
    SHORT_CHANNELS_TAG,
    dataset,
    integer,
    numbered,
    probe_channels,
    read_aux_groups,
    read_stims,
    text,
    time_base,
    unit_factor,
)
from fstats.inputs._naming import recording_stem, sidecar_path, stem_entities
from fstats.inputs._validate import (
    check_flow_values,
    clean_times,
    fill_missing,
    note_repair,
    regular_grid,
)
from fstats.inputs.masks import read_flow_mask
from fstats.inputs.recording import (
    SHORT_SEPARATION_THRESHOLD_CM,
    Recording,
)

__all__ = ["DCS_DATA_TYPES", "SHORT_CHANNELS_TAG", "read_snirf"]

logger = logging.getLogger(__name__)

#: SNIRF dataType codes fstats reads: 401 = DCS g2, 410 = DCS blood-flow index.
DCS_DATA_TYPES: dict[int, str] = {401: "g2", 410: "BFi"}
#: dataType 1 (continuous-wave amplitude) with dataUnit "Hz": a DCS detector's count rate.
_INTENSITY_TYPE = 1
_OTHER_TYPES = {
    1: "continuous-wave amplitude",
    101: "frequency-domain AC amplitude",
    201: "time-domain gated amplitude",
    301: "time-domain moments",
    99999: "processed",
}
_LENGTH_TO_CM = {"mm": 0.1, "cm": 1.0, "m": 100.0}
_TIME_TO_S = {"s": 1.0, "ms": 1e-3, "us": 1e-6}
_BFI_UNITS = {"cm2/s": ("cm2/s", 1.0), "mm2/s": ("cm2/s", 0.01), "relative": ("relative", 1.0)}


def read_snirf(
    path: str | Path, *, short_threshold_cm: float = SHORT_SEPARATION_THRESHOLD_CM
) -> Recording:
    """A recording from a SNIRF file with DCS BFi (410) and/or g2 (401) data.

    Parameters
    ----------
    path : str or Path
        The ``.snirf`` file (see the module notes for the layout).
    short_threshold_cm : float, default=1.5
        Channels at or below this separation (cm) are short-separation channels, unless
        the file lists its short channels in ``metaDataTags/fstats_short_channels``.

    Returns
    -------
    Recording
        Flow (BFi, cm²/s, or relative), g2 (n_times, n_channels, n_lags) and lags (s) if
        present, stim groups as events, aux groups as auxiliary signals; the
        ``<stem>_flowmask.tsv`` sidecar, when present beside a file with BFi, in
        ``provenance["flow"]["masks"]["exclude"]`` (bool, (n_times, n_channels)).

    Raises
    ------
    InputError
        Naming the file and the HDF5 group or dataset at fault.
    """
    path = Path(path)
    if not path.is_file():
        raise InputError(path, "file", "an existing SNIRF file", "no such file")
    try:
        handle = h5py.File(path, "r")
    except OSError:
        raise InputError(path, "file", "an HDF5 (SNIRF) file", "unreadable or not HDF5") from None
    with handle:
        try:
            return _read(path, handle, short_threshold_cm)
        except InputError:
            raise
        except (KeyError, OSError, ValueError, TypeError) as exc:  # malformed HDF5 content
            logger.debug("reading %s failed", path, exc_info=True)
            raise InputError(
                path, "file", "a readable SNIRF file", f"{type(exc).__name__}: {exc}"
            ) from None


def _read(path: Path, handle: h5py.File, short_threshold_cm: float) -> Recording:
    if "formatVersion" not in handle:
        raise InputError(path, "/formatVersion", "a SNIRF format version", "missing")
    groups = ["nirs"] if "nirs" in handle else numbered(handle, "nirs")
    if not groups:
        raise InputError(path, "/nirs", "a /nirs group", sorted(handle))
    if len(groups) > 1:
        logger.warning("%s: reading /%s only of %d nirs groups", path, groups[0], len(groups))
    nirs = handle[groups[0]]
    meta = nirs.get("metaDataTags")
    to_cm = unit_factor(path, meta, "LengthUnit", _LENGTH_TO_CM, "mm")
    to_s = unit_factor(path, meta, "TimeUnit", _TIME_TO_S, "s")
    blocks = numbered(nirs, "data")
    if not blocks:
        raise InputError(path, f"{nirs.name}/data1", "a data group with dataTimeSeries", "none")
    if "probe" not in nirs:
        raise InputError(path, f"{nirs.name}/probe", "a probe group", "missing")
    probe = nirs["probe"]
    times = None
    columns: list[np.ndarray] = []  # one series per DCS measurement
    keys: list[tuple] = []  # (kind, (source, detector, wavelength), dataTypeIndex, unit, where)
    ignored: list[int] = []  # dataType codes of measurements that are not DCS
    repairs: list[dict] = []
    for block in blocks:
        data = nirs[block]
        series = np.asarray(
            dataset(path, data, "dataTimeSeries", "measurements (n_times, n_measurements)")[()],
            dtype=float,
        )
        if series.ndim == 1:
            series = series[:, None]
        if series.ndim != 2 or series.shape[0] == 0:
            raise InputError(
                path, f"{data.name}/dataTimeSeries", "a 2-D array with data", series.shape
            )
        lists = numbered(data, "measurementList")
        n_time = dataset(path, data, "time", "sample times").size
        if series.shape[0] == len(lists) != series.shape[1] and series.shape[1] == n_time:
            series = series.T
            note_repair(
                repairs,
                "transposed_data",
                f"{path}: {data.name}/dataTimeSeries stored as (n_measurements, n_times); "
                "read transposed",
            )
        block_times = time_base(path, data, series.shape[0], to_s)
        if times is None:
            times = block_times
        elif not np.array_equal(times, block_times):
            raise InputError(
                path,
                f"{data.name}/time",
                f"the time base of {nirs.name}/data1",
                "different sample times",
            )
        if len(lists) != series.shape[1]:
            raise InputError(
                path,
                f"{data.name}",
                f"{series.shape[1]} measurementList groups (one per dataTimeSeries column)",
                f"{len(lists)}",
            )
        for column, name in enumerate(lists):
            entry = data[name]
            data_type = integer(path, entry, "dataType")
            if data_type not in DCS_DATA_TYPES and data_type != _INTENSITY_TYPE:
                ignored.append(data_type)
                continue
            key = tuple(
                integer(path, entry, f, default=1)
                for f in ("sourceIndex", "detectorIndex", "wavelengthIndex")
            )
            index = integer(path, entry, "dataTypeIndex", default=1)
            unit_set = entry.get("dataUnit")
            unit = text(unit_set[()]) if unit_set is not None else ""
            if data_type == _INTENSITY_TYPE and unit != "Hz":
                ignored.append(data_type)
                continue
            kind = DCS_DATA_TYPES.get(data_type, "count rate")
            columns.append(series[:, column])
            keys.append((kind, key, index, unit, entry.name))
    if not any(k[0] in ("BFi", "g2") for k in keys):
        found = sorted(set(ignored) | {_INTENSITY_TYPE for k in keys})
        names = [_OTHER_TYPES.get(t, str(t)) for t in found]
        raise InputError(
            path,
            f"{nirs.name}/data1/measurementList1/dataType",
            "DCS measurements (dataType 401 g2 or 410 BFi)",
            found,
            hint=f"this file holds {', '.join(names) or 'no'} data",
        )
    if ignored:
        logger.info(
            "%s: ignoring %d non-DCS measurement(s) of dataType %s",
            path,
            len(ignored),
            sorted(set(ignored)),
        )
    return _assemble(
        path, nirs, probe, meta, times, columns, keys, to_cm, to_s, short_threshold_cm, repairs
    )


def _assemble(
    path, nirs, probe, meta, times, columns, keys, to_cm, to_s, short_threshold_cm, repairs
):
    channel_keys, channels = probe_channels(path, probe, meta, keys, to_cm, short_threshold_cm)
    n_times, n_channels = times.size, len(channels)
    flow = np.full((n_times, n_channels), np.nan)
    has_flow = np.zeros(n_channels, dtype=bool)
    units = set()
    g2_keys = [k for k in keys if k[0] == "g2"]
    lags = None
    if g2_keys:
        if "correlationTimeDelays" not in probe:
            raise InputError(
                path,
                f"{probe.name}/correlationTimeDelays",
                "lag times of the g2 (dataType 401) measurements",
                "missing",
            )
        lags = np.asarray(probe["correlationTimeDelays"][()], dtype=float).reshape(-1) * to_s
        if not (lags.size and np.isfinite(lags).all() and (lags > 0).all()):
            raise InputError(
                path,
                f"{probe.name}/correlationTimeDelays",
                "lag times > 0",
                lags.tolist()[:5],
            )
        g2 = np.full((n_times, n_channels, lags.size), np.nan)
    rate = None
    for column, (kind, key, index, unit, where) in zip(columns, keys, strict=True):
        if key not in channel_keys:  # a count rate without DCS data for its channel
            continue
        c = channel_keys.index(key)
        if kind == "count rate":
            if rate is None:
                rate = np.full((n_times, n_channels), np.nan)
            rate[:, c] = column
        elif kind == "BFi":
            if unit not in _BFI_UNITS and unit:
                raise InputError(
                    path,
                    f"{where}/dataUnit",
                    f"one of {list(_BFI_UNITS)}",
                    unit,
                    suggest(unit, _BFI_UNITS),
                )
            flow_unit, scale = _BFI_UNITS[unit or "cm2/s"]
            units.add(flow_unit)
            flow[:, c] = column * scale
            has_flow[c] = True
        else:
            if not 1 <= index <= lags.size:
                raise InputError(
                    path,
                    f"{where}/dataTypeIndex",
                    f"a lag index 1..{lags.size} into correlationTimeDelays",
                    index,
                )
            g2[:, c, index - 1] = column
    if len(units) > 1:
        raise InputError(path, "measurementList dataUnit", "one flow unit", sorted(units))
    flow_unit = units.pop() if units else "cm2/s"
    if has_flow.any() and not has_flow.all():
        missing = [ch.name for ch, h in zip(channels, has_flow, strict=True) if not h]
        raise InputError(
            path,
            "measurementList dataType",
            "a BFi (410) series for every channel with g2 data",
            f"none for {missing}",
        )
    names = [c.name for c in channels]
    data_path = f"{nirs.name}/data1"

    def where(row: int) -> str:
        return f"{data_path}/dataTimeSeries, row {row + 1} (time {times[row]:.6g} s)"

    if has_flow.any():
        check_flow_values(
            flow,
            flow_unit,
            names,
            path=str(path),
            where=where,
            where_column=lambda c: f"channel {names[c]!r}",
        )
    parts = [flow] + ([] if lags is None else [g2.reshape(n_times, -1)])
    stacked = np.column_stack(parts + ([] if rate is None else [rate]))
    new_times, stacked, rows = clean_times(
        times, stacked, path=str(path), where=where, repairs=repairs
    )
    new_times, stacked, rows = regular_grid(
        new_times, stacked, rows, path=str(path), where=where, repairs=repairs
    )
    flow = stacked[:, :n_channels]
    kept = {}
    if has_flow.any():
        flow, kept = fill_missing(
            new_times, flow, rows, names, path=str(path), where=where, repairs=repairs
        )
    n_g2 = 0 if lags is None else n_channels * lags.size
    g2_out = (
        None
        if lags is None
        else stacked[:, n_channels : n_channels + n_g2].reshape(-1, n_channels, lags.size)
    )
    rate_out = None if rate is None else stacked[:, n_channels + n_g2 :]
    step = float(np.median(np.diff(new_times)))
    events = read_stims(path, nirs, float(new_times[0]), float(new_times[-1] + step))
    subject, session = stem_entities(recording_stem(path))
    if subject is None and meta is not None and "SubjectID" in meta:
        tag = text(meta["SubjectID"][()]).strip()
        subject = tag if tag not in ("", "n/a") else None
    provenance = {"repairs": repairs, "missing_samples": kept, "files": {"snirf": str(path)}}
    if not has_flow.any():
        provenance["flow_missing"] = True
    elif sidecar_path(path, "flowmask").is_file():  # written by fstats flowfit
        mask_path = sidecar_path(path, "flowmask")
        provenance["files"]["flowmask"] = str(mask_path)
        provenance["flow"] = {"masks": {"exclude": read_flow_mask(mask_path, new_times, names)}}
    return Recording(
        times_s=new_times,
        flow=flow,
        channels=channels,
        flow_unit=flow_unit,
        events=events,
        aux=read_aux_groups(path, nirs, to_s),
        g2=g2_out,
        lags_s=lags,
        count_rate_hz=rate_out,
        source=str(path),
        subject=subject,
        session=session,
        provenance=provenance,
    )
