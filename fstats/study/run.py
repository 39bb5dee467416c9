"""Whole-study runs: every recording through the subject stages, then the group model and reports.

Output folder layout::

    <output>/
      index.html                    cohort page (when reports are on)
      study.json                    what the last run did: per-subject status, timings, group files
      subjects.tsv                  one row per recording: status (computed|reused|failed), error
      subjects/<stem>/
        <stem>_glm.tsv/.json        subject GLM results (fstats.fit.write_subject_results)
        <stem>_timecourses.tsv      block-averaged time courses (fit stage)
        report.html, figures/       subject page (when reports are on)
        done.json                   done marker, written last: hash of inputs and options
        failed.json, error.log      instead, for a failed subject: one-line error, full traceback
      group/                        group tables (fstats.group.write_group_results)
"""

from __future__ import annotations

import contextlib
import logging
import os
import time
import uuid
from collections.abc import Callable, Iterator
from pathlib import Path

from fstats.errors import InputError
from fstats.study.cohort import StudyOutcome, finish_study
from fstats.study.engine import (
    StudyProgress,
    default_workers,
    run_tasks,
)
from fstats.study.ledger import (
    FAILED_MARKER,
    WORK_PREFIX,
    file_sha256,
    options_key,
    read_marker,
    remove_leftovers,
)
from fstats.study.studyfile import StudyRecording, StudySpec, load_study
from fstats.study.task import SubjectOutcome, SubjectTask, analyse_subject

__all__ = ["StudyOutcome", "run_study", "regroup", "plan_tasks"]

logger = logging.getLogger(__name__)

ProgressHook = Callable[[StudyProgress], None]


#: Files a recording may consist of, after its stem (CONTRACTS §1).
_RECORDING_PARTS = (
    "_flow.tsv",
    "_flow.csv",
    "_channels.tsv",
    "_events.tsv",
    "_aux.tsv",
    "_flowmask.tsv",
    "_dcs.snirf",
)


def _input_files(recording: StudyRecording) -> list[Path]:
    """The main data file and the sidecars sharing its stem."""
    folder = recording.path.parent
    files = {recording.path}
    files.update(folder / f"{recording.stem}{part}" for part in _RECORDING_PARTS)
    return sorted(p for p in files if p.is_file())


def _fstats_version() -> str:
    from fstats import __version__

    return __version__


def plan_tasks(spec: StudySpec, *, reports: bool, force: bool = False):
    """Split the study's recordings into reusable outcomes and tasks still to run.

    A recording is reusable when its folder has a done marker with the same
    hash of inputs (file SHA-256 of the data file and its sidecars) and options
    (design file SHA-256, fit options, channel roles, fstats version), every file
    the marker lists exists, and it has a subject page when reports are wanted.

    Returns
    -------
    reused : dict of int to SubjectOutcome
        Reusable outcomes by recording index.
    tasks : dict of int to SubjectTask
        Tasks to run by recording index.
    """
    subjects_dir = spec.output_dir / "subjects"
    design_sha = file_sha256(spec.design_path)
    version = _fstats_version()
    options = {
        "design_sha256": design_sha,
        "fit": spec.fit_options,
        "short_channels": spec.short_channels,
        "long_channels": spec.long_channels,
        "short_threshold_cm": spec.short_threshold_cm,
        "fstats_version": version,
    }
    provenance = {
        "study": str(spec.path),
        "study_title": spec.title,
        "fstats_version": version,
        "design": {"path": str(spec.design_path), "sha256": design_sha},
    }
    reused: dict[int, SubjectOutcome] = {}
    tasks: dict[int, SubjectTask] = {}
    for index, recording in enumerate(spec.recordings):
        try:
            inputs = {str(p): file_sha256(p) for p in _input_files(recording)}
        except OSError as exc:
            inputs = {str(recording.path): f"unreadable: {exc.strerror}"}
        key = options_key({Path(p).name: h for p, h in inputs.items()}, options)
        final = subjects_dir / recording.stem
        marker = read_marker(final)
        if (
            not force
            and marker is not None
            and marker.get("key") == key
            and (marker.get("reports") or not reports)
            and all((final / name).is_file() for name in marker.get("files", {}).values())
        ):
            reused[index] = SubjectOutcome(
                participant_id=recording.participant_id,
                session=recording.session,
                stem=recording.stem,
                status="reused",
                files=dict(marker.get("files", {})),
            )
            continue
        tasks[index] = SubjectTask(
            participant_id=recording.participant_id,
            session=recording.session,
            stem=recording.stem,
            recording_path=str(recording.path),
            design_path=str(spec.design_path),
            output_dir=str(final),
            work_dir=str(subjects_dir / f"{WORK_PREFIX}{recording.stem}-{uuid.uuid4().hex[:8]}"),
            key=key,
            inputs=inputs,
            short_channels=spec.short_channels,
            long_channels=spec.long_channels,
            short_threshold_cm=spec.short_threshold_cm,
            fit_options=dict(spec.fit_options),
            reports=reports,
            provenance=provenance,
        )
    return reused, tasks


@contextlib.contextmanager
def _output_lock(output_dir: Path) -> Iterator[None]:
    """Hold an exclusive lock on the output folder (released by the OS if the run dies)."""
    output_dir.mkdir(parents=True, exist_ok=True)
    try:
        import fcntl
    except ImportError:  # not POSIX: no lock
        yield
        return
    with open(output_dir / ".fstats.lock", "w") as handle:
        try:
            fcntl.flock(handle, fcntl.LOCK_EX | fcntl.LOCK_NB)
        except OSError:
            raise InputError(
                output_dir, "output folder", "a folder no other fstats run is using", "locked"
            ) from None
        try:
            yield
        finally:
            fcntl.flock(handle, fcntl.LOCK_UN)


def _replay(outcome: SubjectOutcome) -> None:
    """Log, in this process, what a worker logged for one subject."""
    for level, name, message in outcome.messages:
        target = logging.getLogger(name if name.startswith(("fstats", "py.")) else "fstats")
        target.log(
            level if level >= logging.WARNING else logging.DEBUG, "%s: %s", outcome.stem, message
        )


def _notify(progress: ProgressHook | None, stage: str, done: int, total: int, message: str) -> None:
    if progress is not None:
        progress(StudyProgress(stage=stage, done=done, total=total, message=message))


def run_study(
    study_path: str | os.PathLike[str],
    *,
    workers: int | None = None,
    scheduler: object = None,
    reports: bool = True,
    force: bool = False,
    progress: ProgressHook | None = None,
    task_function: Callable[[SubjectTask], SubjectOutcome] = analyse_subject,
) -> StudyOutcome:
    """Run a study end to end: subject tasks, group model, reports.

    Subjects whose done marker matches their inputs and options are reused, the
    others run as independent tasks; a failing subject is recorded with its
    one-line error and the run goes on.

    Parameters
    ----------
    study_path : str or path-like
        Study YAML file (see :mod:`fstats.study.studyfile`).
    workers : int, optional
        Worker processes; default the study file's ``workers``, else
        ``os.cpu_count()``.
    scheduler : None, str or dask.distributed.Client, optional
        ``None``/``"processes"`` (local processes), ``"local-cluster"`` (a Dask
        LocalCluster), a Dask scheduler address, a ``Client``, or ``"inline"``.
    reports : bool, default=True
        Write HTML pages as the study file says; ``False`` writes none.
    force : bool, default=False
        Recompute every subject even when its done marker matches.
    progress : callable, optional
        Called with a :class:`~fstats.study.engine.StudyProgress` after each step.
    task_function : callable, default=analyse_subject
        The per-subject function (module level, picklable by reference).

    Returns
    -------
    StudyOutcome
        Per-subject outcomes, group files and cohort page.

    Raises
    ------
    InputError
        For a bad study file (checked before any subject runs).  A group level that
        fails is recorded in ``StudyOutcome.group_error``; subject results are kept
        and ``regroup`` reruns it.
    """
    started = time.perf_counter()
    spec = load_study(study_path)
    reports = bool(reports and spec.reports)
    workers = workers or spec.workers or default_workers()
    subjects_dir = spec.output_dir / "subjects"
    with _output_lock(spec.output_dir):
        subjects_dir.mkdir(parents=True, exist_ok=True)
        if remove_leftovers([subjects_dir]):
            logger.info("removed unfinished work of an interrupted run")
        reused, tasks = plan_tasks(spec, reports=reports, force=force)
        total = len(spec.recordings)
        logger.info(
            "%s: %d recordings, %d reused, %d to run on %s",
            spec.title,
            total,
            len(reused),
            len(tasks),
            _describe(scheduler, workers, len(tasks)),
        )
        done = 0
        _notify(progress, "subjects", 0, total, "")
        for outcome in reused.values():
            done += 1
            logger.info("%s: reused (inputs and options unchanged)", outcome.stem)
            _notify(progress, "subjects", done, total, f"{outcome.stem}: reused")

        def arrived(outcome: SubjectOutcome) -> None:
            nonlocal done
            done += 1
            _replay(outcome)
            if outcome.ok:
                logger.info("%s: %s in %.1f s", outcome.stem, outcome.status, outcome.seconds)
            else:
                logger.warning("%s: failed: %s", outcome.stem, outcome.error)
            _notify(progress, "subjects", done, total, f"{outcome.stem}: {outcome.status}")

        task_list = [tasks[i] for i in sorted(tasks)]
        computed = run_tasks(
            task_list, task_function, workers=workers, scheduler=scheduler, on_outcome=arrived
        )
        by_index = dict(reused)
        by_index.update(zip(sorted(tasks), computed, strict=True))
        subjects = tuple(by_index[i] for i in range(total))
        return finish_study(spec, subjects, reports=reports, progress=progress, started=started)


def _describe(scheduler: object, workers: int, n_tasks: int) -> str:
    if scheduler in (None, "processes"):
        return f"{min(workers, max(n_tasks, 1))} local processes"
    if scheduler == "local-cluster":
        return f"a Dask LocalCluster of {workers} workers"
    if scheduler == "inline":
        return "this process"
    return f"the Dask scheduler {scheduler}"


def regroup(
    study_path: str | os.PathLike[str],
    *,
    reports: bool = True,
    progress: ProgressHook | None = None,
) -> StudyOutcome:
    """Rerun only the group level and the reports from the stored subject results.

    Subjects with a done marker are pooled (with a warning when their inputs
    or options changed since they were computed); subjects with a failure record,
    or never run, are listed as failed.

    Parameters
    ----------
    study_path : str or path-like
        Study YAML file.
    reports : bool, default=True
        Write the cohort page as the study file says; ``False`` writes none.
    progress : callable, optional
        Progress hook, as for :func:`run_study`.

    Returns
    -------
    StudyOutcome
    """
    started = time.perf_counter()
    spec = load_study(study_path)
    reports = bool(reports and spec.reports)
    with _output_lock(spec.output_dir):
        _, tasks = plan_tasks(spec, reports=False)
        subjects = []
        for index, recording in enumerate(spec.recordings):
            folder = spec.output_dir / "subjects" / recording.stem
            done = read_marker(folder)
            failed = read_marker(folder, FAILED_MARKER)
            common = {
                "participant_id": recording.participant_id,
                "session": recording.session,
                "stem": recording.stem,
            }
            if done is not None:
                if index in tasks:
                    logger.warning(
                        "%s: stored results are older than its inputs or options; "
                        "'fstats run' recomputes them",
                        recording.stem,
                    )
                subjects.append(
                    SubjectOutcome(**common, status="reused", files=dict(done.get("files", {})))
                )
            elif failed is not None:
                subjects.append(
                    SubjectOutcome(
                        **common,
                        status="failed",
                        error=str(failed.get("error", "failed")),
                        files=dict(failed.get("files", {})),
                    )
                )
            else:
                subjects.append(
                    SubjectOutcome(**common, status="failed", error="no stored results (not run)")
                )
            _notify(progress, "subjects", index + 1, len(spec.recordings), recording.stem)
        return finish_study(
            spec, tuple(subjects), reports=reports, progress=progress, started=started
        )
