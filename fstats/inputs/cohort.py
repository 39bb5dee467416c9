"""Cohort folders: ``participants.tsv`` plus one ``sub-<label>/`` folder per participant.

::

    <cohort>/participants.tsv
    <cohort>/sub-01/sub-01_task-subtract_flow.tsv     (+ _channels.tsv, _events.tsv, _aux.tsv)
    <cohort>/sub-02/sub-02_task-subtract_run-1_dcs.snirf

A recording is any file under a ``sub-*`` folder (sub-folders such as ``ses-*`` included)
whose name ends in ``_flow.tsv``, ``_flow.csv`` or ``_dcs.snirf``; when several exist for
the same stem the first of that list is used.  Each file name must start with its folder's
participant id.
"""

from __future__ import annotations

import logging
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

from fstats.errors import InputError
from fstats.inputs._naming import DATA_SUFFIXES, recording_stem, stem_entities
from fstats.inputs._tabular import read_delimited, require_columns
from fstats.inputs.recording import Recording
from fstats.inputs.snirf import read_snirf
from fstats.inputs.tables import read_flow_table

__all__ = [
    "RecordingEntry",
    "Cohort",
    "read_recording",
    "read_participants",
    "find_recordings",
    "read_cohort",
]

logger = logging.getLogger(__name__)


@dataclass(frozen=True)
class RecordingEntry:
    """One recording found in a cohort folder.

    Parameters
    ----------
    participant_id : str
        ``"sub-01"``.
    stem : str
        File name without the data suffix (``"sub-01_task-subtract_run-2"``).
    path : Path
        The main data file (flow table or SNIRF).
    session : str or None
        Entities after ``sub`` and ``task`` (``"run-2"``), or None.
    """

    participant_id: str
    stem: str
    path: Path
    session: str | None = None


@dataclass(frozen=True)
class Cohort:
    """A cohort folder: participants table and recordings.

    Parameters
    ----------
    root : Path
        The cohort folder.
    participants : pandas.DataFrame
        ``participants.tsv`` (``participant_id`` first; ``n/a`` as missing).
    recordings : tuple of RecordingEntry
        Sorted by participant id, then stem.
    """

    root: Path
    participants: pd.DataFrame
    recordings: tuple[RecordingEntry, ...]

    def for_participant(self, participant_id: str) -> tuple[RecordingEntry, ...]:
        """The recordings of one participant."""
        return tuple(e for e in self.recordings if e.participant_id == participant_id)


def read_recording(path: str | Path, **kwargs) -> Recording:
    """Read a flow table (``.tsv``/``.csv``) or a SNIRF file (``.snirf``), by suffix.

    Parameters
    ----------
    path : str or Path
        The recording's main data file.
    **kwargs
        Passed to :func:`~fstats.inputs.tables.read_flow_table` or
        :func:`~fstats.inputs.snirf.read_snirf` (``short_threshold_cm`` for both).
    """
    path = Path(path)
    suffix = path.suffix.lower()
    if suffix == ".snirf":
        return read_snirf(path, **kwargs)
    if suffix in (".tsv", ".csv"):
        for sidecar in ("_channels", "_events", "_aux", "_flowmask"):
            if path.stem.endswith(sidecar):
                raise InputError(
                    path,
                    "file name",
                    "a recording (flow table '<stem>_flow.tsv' or '<stem>_dcs.snirf')",
                    f"a {sidecar[1:]} sidecar",
                    hint=f"pass {recording_stem(path).removesuffix(sidecar)}_flow{suffix}",
                )
        return read_flow_table(path, **kwargs)
    raise InputError(
        path, "file name", "a '.tsv', '.csv' or '.snirf' recording", path.suffix or path.name
    )


def read_participants(path: str | Path) -> pd.DataFrame:
    """The BIDS ``participants.tsv`` table.

    Parameters
    ----------
    path : str or Path
        Tab-separated; ``participant_id`` (``sub-<label>``) required, other columns
        (``group``, ``age``, ``sex``, ...) free.  ``n/a`` cells are missing; columns whose
        present cells are all numbers become numeric.

    Returns
    -------
    pandas.DataFrame
        Default integer index, ``participant_id`` as the first column.

    Raises
    ------
    InputError
        A missing ``participant_id`` column, an id not of the form ``sub-<label>``, or
        a repeated id (line named).
    """
    table = read_delimited(path, what="a participants table")
    require_columns(table, ("participant_id",), what="a participants table")
    column = table.index("participant_id")
    seen: dict[str, int] = {}
    for row, line in zip(table.rows, table.lines, strict=True):
        pid = row[column]
        label = pid.removeprefix("sub-")
        if not pid.startswith("sub-") or not label or not label.isalnum():
            raise InputError(
                path, f"line {line}, column 'participant_id'", "an id 'sub-<label>'", pid
            )
        if pid in seen:
            raise InputError(
                path,
                f"line {line}, column 'participant_id'",
                f"unique ids (already on line {seen[pid]})",
                pid,
            )
        seen[pid] = int(line)
    frame = pd.DataFrame(table.rows, columns=list(table.header))
    frame = frame.replace({"n/a": np.nan, "": np.nan})
    for name in frame.columns:
        if name == "participant_id":
            continue
        converted = pd.to_numeric(frame[name], errors="coerce")
        if converted.notna().sum() == frame[name].notna().sum() and frame[name].notna().any():
            frame[name] = converted
    order = ["participant_id", *[c for c in frame.columns if c != "participant_id"]]
    return frame[order]


def find_recordings(cohort_dir: str | Path) -> tuple[RecordingEntry, ...]:
    """The recordings in a cohort folder (see the module notes for the layout).

    Returns
    -------
    tuple of RecordingEntry
        Sorted by participant id, then stem.

    Raises
    ------
    InputError
        The folder does not exist, or a file's name does not start with its folder's id.
    """
    root = Path(cohort_dir)
    if not root.is_dir():
        raise InputError(root, "folder", "a cohort folder", "no such folder")
    found: dict[tuple[str, str], RecordingEntry] = {}
    for folder in sorted(p for p in root.glob("sub-*") if p.is_dir()):
        participant = folder.name
        for suffix in DATA_SUFFIXES:
            for path in sorted(folder.rglob(f"*{suffix}")):
                stem = recording_stem(path)
                subject, session = stem_entities(stem)
                if subject != participant:
                    raise InputError(
                        path,
                        "file name",
                        f"a name starting with the folder's id '{participant}_'",
                        path.name,
                    )
                if (participant, stem) in found:
                    logger.info("%s: using %s for %s", root, found[participant, stem].path, stem)
                    continue
                found[participant, stem] = RecordingEntry(participant, stem, path, session)
    return tuple(found[key] for key in sorted(found))


def read_cohort(cohort_dir: str | Path) -> Cohort:
    """A cohort folder's participants table and recordings.

    Without ``participants.tsv`` the table is built from the ``sub-*`` folders (one
    ``participant_id`` column) with a logged warning.  Participants without recordings
    and recordings of participants missing from the table are logged as warnings.

    Raises
    ------
    InputError
        No recordings at all, or a bad ``participants.tsv``.
    """
    root = Path(cohort_dir)
    recordings = find_recordings(root)
    if not recordings:
        raise InputError(
            root,
            "folder",
            "sub-*/ folders holding *_flow.tsv, *_flow.csv or *_dcs.snirf recordings",
            "no recordings",
        )
    table_path = root / "participants.tsv"
    ids = sorted({e.participant_id for e in recordings})
    if table_path.is_file():
        participants = read_participants(table_path)
    else:
        logger.warning("%s: no participants.tsv; participants taken from the folders", root)
        participants = pd.DataFrame({"participant_id": ids})
    listed = set(participants["participant_id"])
    for pid in ids:
        if pid not in listed:
            logger.warning("%s: %s has recordings but is not in participants.tsv", root, pid)
    for pid in sorted(listed - set(ids)):
        logger.warning("%s: %s is in participants.tsv but has no recordings", root, pid)
    return Cohort(root=root, participants=participants, recordings=recordings)
