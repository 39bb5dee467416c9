"""Running subject tasks: local worker processes or a Dask cluster, one failure at a time.

The engine takes a list of :class:`~fstats.study.task.SubjectTask` and a task
function (normally :func:`~fstats.study.task.analyse_subject`) and hands each task
to an existing scheduler; it schedules nothing itself:

* ``"processes"`` (default): :class:`concurrent.futures.ProcessPoolExecutor` with
  freshly spawned worker processes (the ``spawn`` start method, safe with threads
  and on every platform), each limited to one BLAS thread;
* ``"local-cluster"``: a :class:`dask.distributed.LocalCluster` started for the run;
* an address such as ``"tcp://scheduler.example.org:8786"`` or a ``dask.distributed.Client``:
  an existing Dask scheduler (the output folder must be visible to its workers);
* ``"inline"``: in this process, one task after another (debugging).

Every task runs inside :func:`run_subject_task`, which gives it a fresh work
folder, turns any exception into a one-line error (full traceback to
``error.log`` in the subject folder), writes the marker last and renames the
folder into place.  The same task function on the same inputs gives the same
files whichever scheduler runs it.
"""

from __future__ import annotations

import contextlib
import dataclasses
import logging
import multiprocessing
import os
import shutil
import threading
import time
import traceback
import uuid
import warnings
from collections.abc import Callable, Iterator, Sequence
from concurrent.futures import ProcessPoolExecutor, as_completed
from concurrent.futures.process import BrokenProcessPool
from dataclasses import dataclass
from datetime import UTC, datetime
from pathlib import Path

from fstats.errors import InputError
from fstats.study.ledger import (
    DONE_MARKER,
    FAILED_MARKER,
    move_into_place,
    write_json_atomic,
    write_text_atomic,
)
from fstats.study.task import SubjectOutcome, SubjectTask

__all__ = [
    "SCHEDULERS",
    "StudyProgress",
    "run_subject_task",
    "run_tasks",
    "one_line_error",
    "default_workers",
]

logger = logging.getLogger(__name__)

#: Named schedulers; any other string is taken as a Dask scheduler address.
SCHEDULERS: tuple[str, ...] = ("processes", "local-cluster", "inline")

#: Thread-count variables set to 1 in spawned workers (unless the user set them),
#: so that N workers on N cores do not each start N BLAS threads.
_THREAD_VARIABLES = ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS")

_ERROR_CHARS = 400
_TRACEBACK_NAME = "error.log"


@dataclass(frozen=True)
class StudyProgress:
    """One progress step, passed to the ``progress`` callback of a run.

    Parameters
    ----------
    stage : str
        ``"subjects"``, ``"group"`` or ``"cohort report"``.
    done : int
        Steps finished in this stage so far.
    total : int
        Steps in this stage.
    message : str
        What just finished (``"sub-03: computed"``).
    """

    stage: str
    done: int
    total: int
    message: str = ""


def default_workers() -> int:
    """Number of worker processes sized to the machine: ``os.cpu_count()`` (at least 1)."""
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except AttributeError:  # not on Linux
        return max(1, os.cpu_count() or 1)


def one_line_error(exc: BaseException) -> str:
    """A failure as one line: the ``InputError`` message, else ``"Type: message"``."""
    text = str(exc) if isinstance(exc, InputError) else f"{type(exc).__name__}: {exc}"
    text = " ".join(text.split()) or type(exc).__name__
    return text if len(text) <= _ERROR_CHARS else text[: _ERROR_CHARS - 3] + "..."


class _TaskCapture(logging.Handler):
    """Collects the ``fstats`` log records emitted by the current thread."""

    def __init__(self) -> None:
        super().__init__(logging.INFO)
        self.thread = threading.get_ident()
        self.records: list[tuple[int, str, str]] = []

    def emit(self, record: logging.LogRecord) -> None:
        if record.thread == self.thread and not record.name.startswith(__name__):
            self.records.append((record.levelno, record.name, record.getMessage()))


def run_subject_task(
    function: Callable[[SubjectTask], SubjectOutcome], task: SubjectTask
) -> SubjectOutcome:
    """Run one task with failure isolation and an atomic, marked result folder.

    Creates ``task.work_dir``, calls ``function(task)`` (which writes its files
    there), catches any exception as the subject's one-line error (traceback to
    ``error.log``), writes ``done.json`` or ``failed.json`` last, then renames the
    work folder onto ``task.output_dir``.  Runs inside the worker.

    Parameters
    ----------
    function : callable
        The task function, ``function(task) -> SubjectOutcome``.
    task : SubjectTask
        The task.

    Returns
    -------
    SubjectOutcome
        ``"computed"`` or ``"failed"``, with the log records and warnings the
        task emitted in ``messages``.
    """
    started = time.perf_counter()
    work_dir = Path(task.work_dir)
    work_dir.mkdir(parents=True, exist_ok=False)
    capture = _TaskCapture()
    package_logger = logging.getLogger("fstats")
    package_logger.addHandler(capture)
    outcome: SubjectOutcome | None = None
    error = ""
    try:
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("default")
            try:
                outcome = function(task)
            except Exception as exc:  # failure isolation: any error fails this subject only
                error = one_line_error(exc)
                write_text_atomic(work_dir / _TRACEBACK_NAME, traceback.format_exc())
    finally:
        package_logger.removeHandler(capture)
    messages = list(capture.records)
    seen = set()
    for item in caught:
        text = f"{item.category.__name__}: {item.message}"
        if text not in seen:
            seen.add(text)
            messages.append((logging.WARNING, "py.warnings", " ".join(text.split())))
    seconds = time.perf_counter() - started
    if outcome is None:
        outcome = SubjectOutcome(
            participant_id=task.participant_id,
            session=task.session,
            stem=task.stem,
            status="failed",
            error=error,
            files={"traceback": _TRACEBACK_NAME},
        )
    outcome = dataclasses.replace(outcome, seconds=seconds, messages=tuple(messages))
    marker = {
        "key": task.key,
        "participant_id": task.participant_id,
        "session": task.session,
        "stem": task.stem,
        "status": outcome.status,
        "error": outcome.error,
        "files": dict(outcome.files),
        "reports": bool(task.reports and "report" in outcome.files),
        "inputs": dict(task.inputs),
        "seconds": round(seconds, 3),
        "stage_seconds": dict(outcome.stage_seconds),
        "finished": datetime.now(UTC).isoformat(timespec="seconds"),
        "warnings": [m[2] for m in messages if m[0] >= logging.WARNING],
    }
    write_json_atomic(work_dir / (DONE_MARKER if outcome.ok else FAILED_MARKER), marker)
    move_into_place(work_dir, task.output_dir)
    return outcome


def _failed(task: SubjectTask, exc: BaseException) -> SubjectOutcome:
    """Outcome for a task whose worker died (nothing was moved into place)."""
    return SubjectOutcome(
        participant_id=task.participant_id,
        session=task.session,
        stem=task.stem,
        status="failed",
        error=f"worker lost: {one_line_error(exc)}",
    )


def _watch_parent(parent_pid: int) -> None:
    """Worker initializer: exit as soon as the main process is gone (e.g. SIGKILLed)."""

    def watch() -> None:
        while True:
            time.sleep(0.5)
            if os.getppid() != parent_pid:
                os._exit(70)

    threading.Thread(target=watch, name="fstats-parent-watch", daemon=True).start()


@contextlib.contextmanager
def _single_thread_workers() -> Iterator[None]:
    """Set the BLAS thread variables to 1 while workers are spawned (they inherit them)."""
    saved = {name: os.environ.get(name) for name in _THREAD_VARIABLES}
    for name, value in saved.items():
        if value is None:
            os.environ[name] = "1"
    try:
        yield
    finally:
        for name, value in saved.items():
            if value is None:
                os.environ.pop(name, None)


def run_tasks(
    tasks: Sequence[SubjectTask],
    function: Callable[[SubjectTask], SubjectOutcome],
    *,
    workers: int | None = None,
    scheduler: object = None,
    on_outcome: Callable[[SubjectOutcome], None] | None = None,
) -> list[SubjectOutcome]:
    """Run tasks on a scheduler and return their outcomes in task order.

    Parameters
    ----------
    tasks : sequence of SubjectTask
        Tasks to run (already known not to be reusable).
    function : callable
        Task function, picklable by reference (a module-level function).
    workers : int, optional
        Worker processes for ``"processes"`` and ``"local-cluster"``; default
        :func:`default_workers`.  Ignored for an existing Dask scheduler.
    scheduler : None, str or dask.distributed.Client
        ``None`` or ``"processes"``, ``"local-cluster"``, ``"inline"``, a Dask
        scheduler address, or a connected ``Client``.
    on_outcome : callable, optional
        Called in the main process with each outcome as it arrives.

    Returns
    -------
    list of SubjectOutcome
        One per task, in the order of ``tasks``.
    """
    if not tasks:
        return []
    workers = int(workers) if workers else default_workers()
    if workers < 1:
        raise InputError("--workers", "value", "a number of workers >= 1", workers)
    results: dict[int, SubjectOutcome] = {}

    def record(index: int, outcome: SubjectOutcome) -> None:
        results[index] = outcome
        if on_outcome is not None:
            on_outcome(outcome)

    name = scheduler if isinstance(scheduler, str) or scheduler is None else None
    if name == "inline":
        for index, task in enumerate(tasks):
            outcome = run_subject_task(function, task)
            # this process's handlers already showed the task's messages: no replay
            record(index, dataclasses.replace(outcome, messages=()))
    elif name in (None, "processes"):
        _run_processes(tasks, function, workers, record)
    else:
        _run_dask(tasks, function, workers, scheduler, record)
    return [results[i] for i in range(len(tasks))]


def _run_processes(tasks, function, workers: int, record) -> None:
    """Run on a spawn process pool, isolating a task that kills its worker.

    When a worker process dies (out of memory, a signal), the pool breaks and every
    unfinished task is lost with it.  Those are rerun in single-worker pools, where
    tasks run one after another: the first lost task of such a pool is the one that
    killed the worker; it is recorded as failed and the others go on.
    """
    pending = dict(enumerate(tasks))
    size = workers
    while pending:
        lost = _run_pool(pending, function, size, record)
        if not lost:
            return
        if size == 1:
            culprit = min(lost)
            task = lost.pop(culprit)
            shutil.rmtree(task.work_dir, ignore_errors=True)
            record(culprit, _failed(task, BrokenProcessPool("the process died")))
        if lost:
            logger.warning(
                "a worker process died; rerunning %d unfinished subject(s) one at a time",
                len(lost),
            )
        size = 1
        pending = {}
        for index, task in sorted(lost.items()):
            shutil.rmtree(task.work_dir, ignore_errors=True)
            fresh = f"{task.work_dir.rsplit('-', 1)[0]}-{uuid.uuid4().hex[:8]}"
            pending[index] = dataclasses.replace(task, work_dir=fresh)


def _run_pool(pending: dict, function, workers: int, record) -> dict:
    """One process pool over ``pending``; returns the tasks lost to a broken pool."""
    context = multiprocessing.get_context("spawn")
    with _single_thread_workers():
        executor = ProcessPoolExecutor(
            max_workers=min(workers, len(pending)),
            mp_context=context,
            initializer=_watch_parent,
            initargs=(os.getpid(),),
        )
        try:
            futures = {
                executor.submit(run_subject_task, function, task): index
                for index, task in pending.items()
            }
        except BaseException:
            executor.shutdown(wait=False, cancel_futures=True)
            raise
    lost = {}
    try:
        for future in as_completed(futures):
            index = futures[future]
            try:
                outcome = future.result()
            except BrokenProcessPool:  # a worker process died (memory, signal)
                lost[index] = pending[index]
                continue
            except Exception as exc:  # e.g. the task could not be sent to the worker
                outcome = _failed(pending[index], exc)
            record(index, outcome)
    except BaseException:
        executor.shutdown(wait=False, cancel_futures=True)
        raise
    executor.shutdown(wait=True)
    return lost


def _run_dask(tasks, function, workers: int, scheduler, record) -> None:
    from dask.distributed import Client, LocalCluster
    from dask.distributed import as_completed as dask_as_completed

    with contextlib.ExitStack() as stack:
        if isinstance(scheduler, Client):
            client = scheduler
        elif scheduler == "local-cluster":
            cluster = stack.enter_context(
                LocalCluster(
                    n_workers=workers,
                    threads_per_worker=1,
                    processes=True,
                    dashboard_address=None,
                )
            )
            client = stack.enter_context(Client(cluster))
        else:
            try:
                client = stack.enter_context(Client(str(scheduler), timeout="20s"))
            except OSError as exc:
                raise InputError(
                    "--scheduler",
                    "address",
                    "a reachable Dask scheduler address, 'local-cluster' or 'processes'",
                    str(scheduler),
                    hint=one_line_error(exc),
                ) from exc
        futures = client.map(
            run_subject_task,
            [function] * len(tasks),
            list(tasks),
            pure=False,
            key=[f"fstats-subject-{task.stem}-{Path(task.work_dir).name}" for task in tasks],
        )
        index_of = {future.key: i for i, future in enumerate(futures)}
        for future in dask_as_completed(futures):
            index = index_of[future.key]
            try:
                outcome = future.result()
            except Exception as exc:  # worker lost, task could not be deserialised, ...
                outcome = _failed(tasks[index], exc)
            record(index, outcome)
