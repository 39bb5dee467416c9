"""What a study run has already done: input hashes, done markers and atomic writes.

A subject's outputs are built in a private work folder beside their final place
and moved there in one rename once complete; the *done marker* (``done.json``),
written into the work folder last, records the hash of everything the results
depend on.  A later run recomputes a subject only when its marker is missing,
unreadable or records a different hash, so an interrupted run (even one killed
with SIGKILL) resumes with no half-written files: a killed subject simply has
no final folder, or keeps the complete one of an earlier run.
"""

from __future__ import annotations

import hashlib
import json
import os
import shutil
import tempfile
import uuid
from collections.abc import Iterable, Mapping
from pathlib import Path

__all__ = [
    "DONE_MARKER",
    "FAILED_MARKER",
    "WORK_PREFIX",
    "OLD_PREFIX",
    "file_sha256",
    "options_key",
    "write_json_atomic",
    "write_text_atomic",
    "read_marker",
    "move_into_place",
    "remove_leftovers",
]

#: File name of the marker that says a subject finished and what it depended on.
DONE_MARKER = "done.json"
#: File name of the record left by a subject that failed (it is retried on every run).
FAILED_MARKER = "failed.json"
#: Prefix of the private folder a subject is built in before it is moved into place.
WORK_PREFIX = ".work-"
#: Prefix of a replaced subject folder waiting to be deleted.
OLD_PREFIX = ".old-"

_CHUNK_BYTES = 1 << 20


def file_sha256(path: str | os.PathLike[str]) -> str:
    """SHA-256 of a file's bytes, as 64 hex digits.

    Parameters
    ----------
    path : str or path-like
        File to hash; read in 1 MiB chunks so large recordings need little memory.

    Returns
    -------
    str
        Lower-case hex digest.
    """
    digest = hashlib.sha256()
    with open(path, "rb") as handle:
        for chunk in iter(lambda: handle.read(_CHUNK_BYTES), b""):
            digest.update(chunk)
    return digest.hexdigest()


def options_key(inputs: Mapping[str, str], options: Mapping[str, object]) -> str:
    """One hash of a subject's input-file hashes and the options that shape its results.

    Parameters
    ----------
    inputs : mapping of str to str
        Input file name -> SHA-256 of its bytes.
    options : mapping
        JSON-serialisable options (design file hash, fit options, channel roles,
        fstats version, ...).

    Returns
    -------
    str
        SHA-256 hex digest of the canonical (sorted-key) JSON of both.
    """
    payload = json.dumps(
        {"inputs": dict(inputs), "options": dict(options)},
        sort_keys=True,
        separators=(",", ":"),
        default=str,
    )
    return hashlib.sha256(payload.encode("utf-8")).hexdigest()


def write_text_atomic(path: str | os.PathLike[str], text: str) -> Path:
    """Write text to a temporary file beside ``path``, flush it to disk, then rename.

    A reader sees either the old file or the complete new one, never a part.

    Returns
    -------
    Path
        The written path.
    """
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp_name = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".tmp", dir=path.parent)
    try:
        with os.fdopen(fd, "w", encoding="utf-8", newline="") as handle:
            handle.write(text)
            handle.flush()
            os.fsync(handle.fileno())
        os.replace(tmp_name, path)
    except BaseException:
        Path(tmp_name).unlink(missing_ok=True)
        raise
    return path


def write_json_atomic(path: str | os.PathLike[str], data: object) -> Path:
    """Write ``data`` as indented JSON, atomically (see :func:`write_text_atomic`)."""
    return write_text_atomic(path, json.dumps(data, indent=2, sort_keys=True, default=str) + "\n")


def read_marker(folder: str | os.PathLike[str], name: str = DONE_MARKER) -> dict | None:
    """The marker JSON in ``folder``, or ``None`` when missing or unreadable."""
    path = Path(folder) / name
    try:
        data = json.loads(path.read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return None
    return data if isinstance(data, dict) else None


def move_into_place(work_dir: str | os.PathLike[str], final_dir: str | os.PathLike[str]) -> Path:
    """Replace ``final_dir`` by the completed ``work_dir`` with renames only.

    Both folders must be on the same file system (the work folder is created
    beside the final one).  If the process dies between the two renames, the
    final folder is missing and the subject is recomputed on the next run; it
    is never half old and half new.

    Returns
    -------
    Path
        ``final_dir``.
    """
    work_dir, final_dir = Path(work_dir), Path(final_dir)
    if final_dir.exists():
        old = final_dir.with_name(f"{OLD_PREFIX}{final_dir.name}-{uuid.uuid4().hex[:8]}")
        os.replace(final_dir, old)
        os.replace(work_dir, final_dir)
        shutil.rmtree(old, ignore_errors=True)
    else:
        os.replace(work_dir, final_dir)
    return final_dir


def remove_leftovers(folders: Iterable[str | os.PathLike[str]]) -> int:
    """Delete work folders and replaced folders left by an interrupted run.

    Parameters
    ----------
    folders : iterable of path-like
        Folders whose direct children are subject folders.

    Returns
    -------
    int
        Number of entries removed.
    """
    removed = 0
    for folder in folders:
        folder = Path(folder)
        if not folder.is_dir():
            continue
        for child in folder.iterdir():
            if child.name.startswith((WORK_PREFIX, OLD_PREFIX)) or (
                child.name.startswith(".") and child.name.endswith(".tmp")
            ):
                if child.is_dir():
                    shutil.rmtree(child, ignore_errors=True)
                else:
                    child.unlink(missing_ok=True)
                removed += 1
    return removed
