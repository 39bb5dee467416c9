"""Writing a recording as a SNIRF file (layout in :mod:`fstats.inputs.snirf`)."""

from __future__ import annotations

from pathlib import Path

import h5py
import numpy as np

from fstats.inputs._naming import sidecar_path
from fstats.inputs.masks import recording_exclude_mask, write_flow_mask
from fstats.inputs.recording import Channel, Recording
from fstats.inputs.snirf import SHORT_CHANNELS_TAG

__all__ = ["write_snirf"]


def _put_text(group: h5py.Group, name: str, text: str) -> None:
    group.create_dataset(name, data=text, dtype=h5py.string_dtype("utf-8"))


def write_snirf(recording: Recording, path: str | Path) -> Path:
    """Write a recording as a SNIRF file (layout in the module notes).

    One source at the origin and one detector per channel, at the channel's separation
    (``LengthUnit`` mm) and spread in angle; ``detectorLabels`` hold the channel names.
    The flow is written as dataType 410 (``dataUnit`` = the recording's flow unit), then g2
    (when present) as dataType 401, one measurement per channel and lag with
    ``dataTypeIndex`` = lag number (1-based) into ``probe/correlationTimeDelays`` (s), then
    count rates (when present) as dataType 1 with ``dataUnit`` ``Hz``.  A recording whose
    flow is all NaN (g2 curves not yet fitted, ``provenance["flow_missing"]``) is written
    without 410 measurements: a g2-only file, which :func:`~fstats.inputs.snirf.read_snirf`
    reads back with the flow all NaN.
    Events go to one ``stim`` group per condition, auxiliary signals to ``aux`` groups.
    An exclusion mask in ``provenance["flow"]["masks"]["exclude"]`` goes to the sidecar
    ``<stem>_flowmask.tsv`` (:mod:`fstats.inputs.masks`), written after the SNIRF file.
    Each file is written under a temporary name, then renamed.

    Parameters
    ----------
    recording : Recording
        The recording (flow in cm²/s or relative).
    path : str or Path
        Destination, e.g. ``sub-01/sub-01_task-subtract_dcs.snirf``.

    Returns
    -------
    Path
        ``path``.

    Raises
    ------
    ValueError
        When the flow is all NaN and there are no g2 curves (nothing a reader could use),
        or the exclusion mask does not have the flow's shape.
    """
    path = Path(path)
    with_flow = not np.isnan(recording.flow).all()
    if not with_flow and recording.g2 is None:
        raise ValueError(f"{path.name}: the recording has no flow values and no g2 curves")
    exclude = recording_exclude_mask(recording) if with_flow else None
    path.parent.mkdir(parents=True, exist_ok=True)
    temporary = path.with_name(f".{path.name}.partial")
    channels = recording.channels
    wavelengths = sorted({c.wavelength_nm for c in channels if c.wavelength_nm is not None})
    has_unknown = any(c.wavelength_nm is None for c in channels)
    table = [*wavelengths, *([np.nan] if has_unknown else [])] or [np.nan]

    def wavelength_index(channel: Channel) -> int:
        if channel.wavelength_nm is None:
            return len(table)
        return wavelengths.index(channel.wavelength_nm) + 1

    columns, lists = [], []
    for i, channel in enumerate(channels if with_flow else ()):  # g2-only file: no 410
        columns.append(recording.flow[:, i])
        lists.append((i + 1, wavelength_index(channel), 410, "BFi", 1, recording.flow_unit))
    if recording.g2 is not None:
        for i, channel in enumerate(channels):
            for lag in range(recording.g2.shape[2]):
                columns.append(recording.g2[:, i, lag])
                lists.append((i + 1, wavelength_index(channel), 401, "g2", lag + 1, ""))
    if recording.count_rate_hz is not None:
        for i, channel in enumerate(channels):
            columns.append(recording.count_rate_hz[:, i])
            lists.append((i + 1, wavelength_index(channel), 1, "", 1, "Hz"))
    angles = 2 * np.pi * np.arange(len(channels)) / max(len(channels), 1)
    radii = np.array([c.separation_cm * 10.0 for c in channels])
    detectors = np.column_stack(
        [radii * np.cos(angles), radii * np.sin(angles), np.zeros(len(channels))]
    )
    try:
        with h5py.File(temporary, "w") as handle:
            _put_text(handle, "formatVersion", "1.1")
            nirs = handle.create_group("nirs")
            meta = nirs.create_group("metaDataTags")
            for tag, value in (
                ("SubjectID", recording.subject or "n/a"),
                ("MeasurementDate", "unknown"),
                ("MeasurementTime", "unknown"),
                ("LengthUnit", "mm"),
                ("TimeUnit", "s"),
                ("FrequencyUnit", "Hz"),
                (SHORT_CHANNELS_TAG, ";".join(recording.short_channels)),
            ):
                _put_text(meta, tag, value)
            data = nirs.create_group("data1")
            data.create_dataset("dataTimeSeries", data=np.column_stack(columns))
            data.create_dataset("time", data=np.asarray(recording.times_s, dtype=float))
            for k, (detector, wl, data_type, label, index, unit) in enumerate(lists, start=1):
                entry = data.create_group(f"measurementList{k}")
                for field, value in (
                    ("sourceIndex", 1),
                    ("detectorIndex", detector),
                    ("wavelengthIndex", wl),
                    ("dataType", data_type),
                    ("dataTypeIndex", index),
                ):
                    entry.create_dataset(field, data=np.int32(value))
                if label:
                    _put_text(entry, "dataTypeLabel", label)
                if unit:
                    _put_text(entry, "dataUnit", unit)
            probe = nirs.create_group("probe")
            probe.create_dataset("wavelengths", data=np.asarray(table, dtype=float))
            probe.create_dataset("sourcePos3D", data=np.zeros((1, 3)))
            probe.create_dataset("detectorPos3D", data=detectors)
            probe.create_dataset(
                "sourceLabels",
                data=np.array(["S1"], dtype=object),
                dtype=h5py.string_dtype("utf-8"),
            )
            probe.create_dataset(
                "detectorLabels",
                data=np.array(recording.channel_names, dtype=object),
                dtype=h5py.string_dtype("utf-8"),
            )
            if recording.g2 is not None:
                probe.create_dataset(
                    "correlationTimeDelays", data=np.asarray(recording.lags_s, dtype=float)
                )
            events = recording.events
            if events is not None:
                for k, condition in enumerate(events.condition_names, start=1):
                    chosen = events.select(condition)
                    stim = nirs.create_group(f"stim{k}")
                    _put_text(stim, "name", condition)
                    stim.create_dataset(
                        "data",
                        data=np.column_stack(
                            [chosen.onsets_s, chosen.durations_s, chosen.amplitudes]
                        ),
                    )
                    stim.create_dataset(
                        "dataLabels",
                        data=np.array(["Onset", "Duration", "Amplitude"], dtype=object),
                        dtype=h5py.string_dtype("utf-8"),
                    )
            for k, signal in enumerate(recording.aux.values(), start=1):
                group = nirs.create_group(f"aux{k}")
                _put_text(group, "name", signal.name)
                group.create_dataset("dataTimeSeries", data=np.asarray(signal.values, float))
                group.create_dataset("time", data=np.asarray(signal.times_s, float))
                group.create_dataset("timeOffset", data=np.array([0.0]))
                _put_text(group, "dataUnit", signal.unit)
        temporary.replace(path)
    except BaseException:
        temporary.unlink(missing_ok=True)
        raise
    if exclude is not None:
        write_flow_mask(
            recording.times_s, recording.channel_names, exclude, sidecar_path(path, "flowmask")
        )
    return path
