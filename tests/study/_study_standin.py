"""Stand-in task functions for the study engine tests (module level, so workers can import them).

They read the task's recording file and write a small deterministic table into the
task's work folder, like the real subject stages but with no statistics.
"""

import hashlib
import logging
import time
import warnings
from pathlib import Path

from fstats.errors import FitWarning, InputError
from fstats.study.task import SubjectOutcome

logger = logging.getLogger("fstats.fit.standin")


def summarise(task):
    """Write '<stem>_results.tsv' with the byte count and SHA-256 of the recording file."""
    data = Path(task.recording_path).read_bytes()
    if b"corrupt" in data:
        raise InputError(task.recording_path, "line 2", "a number", "corrupt")
    if b"divide" in data:
        raise ZeroDivisionError("division by zero")
    if b"slow" in data:
        time.sleep(1.0)
    if b"warn" in data:
        logger.warning("flow looks flat")
        warnings.warn("AR fit did not settle", FitWarning, stacklevel=2)
    name = f"{task.stem}_results.tsv"
    text = f"stem\tbytes\tsha256\n{task.stem}\t{len(data)}\t{hashlib.sha256(data).hexdigest()}\n"
    (Path(task.work_dir) / name).write_text(text)
    files = {"results": name}
    if task.reports:
        (Path(task.work_dir) / "report.html").write_text(f"<html><p>{task.stem}</p></html>\n")
        files["report"] = "report.html"
    return SubjectOutcome(task.participant_id, task.session, task.stem, "computed", files=files)


def die(task):
    """Kill the worker process outright (as the out-of-memory killer would)."""
    import os

    if b"die" in Path(task.recording_path).read_bytes():
        os._exit(9)
    return summarise(task)
