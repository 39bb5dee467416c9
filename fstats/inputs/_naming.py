"""File naming of a recording: its stem, sidecar paths and BIDS-like entities.

A recording's *stem* is its file name without the data suffix: ``sub-01_task-subtract_run-2``
for ``sub-01_task-subtract_run-2_flow.tsv`` or ``..._dcs.snirf``.  Sidecars share the stem:
``<stem>_channels.tsv``, ``<stem>_events.tsv``, ``<stem>_aux.tsv``.
"""

from __future__ import annotations

import re
from pathlib import Path

__all__ = ["DATA_SUFFIXES", "recording_stem", "sidecar_path", "stem_entities"]

#: Name endings of a recording's main data file, in order of preference when a
#: cohort folder holds more than one for the same stem.
DATA_SUFFIXES: tuple[str, ...] = ("_flow.tsv", "_flow.csv", "_dcs.snirf")

_ENTITY = re.compile(r"^([a-zA-Z]+)-([a-zA-Z0-9]+)$")


def recording_stem(path: str | Path) -> str:
    """The stem of a recording file: its name without ``_flow.tsv``, ``_dcs.snirf``, ...

    A file that does not end in one of :data:`DATA_SUFFIXES` loses only its extension
    (``myrecording.csv`` -> ``myrecording``).
    """
    name = Path(path).name
    for suffix in DATA_SUFFIXES:
        if name.endswith(suffix):
            return name[: -len(suffix)]
    return Path(name).stem


def sidecar_path(path: str | Path, kind: str) -> Path:
    """Path of a sidecar (``kind`` = ``channels``, ``events``, ``aux``, ``flowmask``) by stem."""
    path = Path(path)
    return path.with_name(f"{recording_stem(path)}_{kind}.tsv")


def stem_entities(stem: str) -> tuple[str | None, str | None]:
    """Participant id and session label from a stem.

    Returns
    -------
    subject : str or None
        ``"sub-01"`` when the stem starts with a ``sub-`` entity.
    session : str or None
        The entities after ``sub`` and ``task`` joined with ``_`` (``"run-2"``,
        ``"ses-a_run-2"``), or None when there are none.
    """
    subject = None
    rest = []
    for part in stem.split("_"):
        match = _ENTITY.match(part)
        if not match:
            continue
        key = match.group(1)
        if key == "sub":
            subject = part
        elif key != "task":
            rest.append(part)
    return subject, ("_".join(rest) or None)
