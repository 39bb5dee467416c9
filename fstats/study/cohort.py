"""The cohort level of a study run: pool subject results, group model, cohort page, run record."""

from __future__ import annotations

import logging
import time
import traceback
from collections.abc import Callable
from dataclasses import dataclass, field
from datetime import UTC, datetime
from pathlib import Path

import pandas as pd

from fstats.errors import InputError
from fstats.fit import read_subject_results
from fstats.group import GroupModel, write_group_results
from fstats.inputs import read_participants
from fstats.study.engine import StudyProgress, one_line_error
from fstats.study.ledger import write_json_atomic, write_text_atomic
from fstats.study.studyfile import StudySpec
from fstats.study.task import SubjectOutcome

__all__ = ["StudyOutcome", "finish_study"]

logger = logging.getLogger(__name__)

ProgressHook = Callable[[StudyProgress], None]


@dataclass(frozen=True, eq=False)
class StudyOutcome:
    """What a study run (or regroup) produced.

    Parameters
    ----------
    study : StudySpec
        The validated study file.
    subjects : tuple of SubjectOutcome
        One per recording, in stem order.
    group_files : tuple of Path
        Group results table and sidecar, empty when the group level did not run.
    group_error : str
        One-line reason the group level did not run or failed; empty when it ran.
    cohort_page : Path or None
        The cohort HTML page, when written.
    seconds : float
        Wall time of the run in seconds.
    timings : dict of str to float
        Seconds spent on the cohort level: ``group`` (pooling and model) and
        ``cohort_page``.
    """

    study: StudySpec
    subjects: tuple[SubjectOutcome, ...]
    group_files: tuple[Path, ...] = ()
    group_error: str = ""
    cohort_page: Path | None = None
    seconds: float = 0.0
    timings: dict = field(default_factory=dict)

    @property
    def failures(self) -> list[dict]:
        """Failed subjects as ``{"participant_id", "stem", "error"}``."""
        return [
            {"participant_id": s.participant_id, "stem": s.stem, "error": s.error}
            for s in self.subjects
            if not s.ok
        ]

    def count(self, status: str) -> int:
        """Number of subjects with a given status (``computed``, ``reused``, ``failed``)."""
        return sum(s.status == status for s in self.subjects)

    @property
    def exit_code(self) -> int:
        """0 when every subject and the group level succeeded, else 1."""
        return 0 if not self.failures and not self.group_error else 1


def _fstats_version() -> str:
    from fstats import __version__

    return __version__


def _notify(progress: ProgressHook | None, stage: str, done: int, total: int, message: str) -> None:
    if progress is not None:
        progress(StudyProgress(stage=stage, done=done, total=total, message=message))


def _participants(spec: StudySpec) -> pd.DataFrame:
    if spec.participants_path is not None:
        return read_participants(spec.participants_path)
    ids = list(dict.fromkeys(r.participant_id for r in spec.recordings))
    return pd.DataFrame({"participant_id": ids})


def _subject_tables(spec: StudySpec, subjects: tuple[SubjectOutcome, ...]) -> list[pd.DataFrame]:
    tables = []
    for outcome in subjects:
        if outcome.ok and "results" in outcome.files:
            path = spec.output_dir / "subjects" / outcome.stem / outcome.files["results"]
            tables.append(read_subject_results(path))
    return tables


def finish_study(
    spec: StudySpec,
    subjects: tuple[SubjectOutcome, ...],
    *,
    reports: bool,
    progress: ProgressHook | None,
    started: float,
) -> StudyOutcome:
    """Group level, cohort page, run summary; shared by run_study and regroup."""
    output = spec.output_dir
    _write_subject_summary(output, subjects)
    provenance = {
        "study": str(spec.path),
        "study_title": spec.title,
        "fstats_version": _fstats_version(),
        "design": {"path": str(spec.design_path)},
        "subjects": [s.stem for s in subjects if s.ok],
        "failed": [s.stem for s in subjects if not s.ok],
    }
    group_files: tuple[Path, ...] = ()
    group_error = ""
    group_result = None
    participants = None
    timings = {}
    clock = time.perf_counter()
    _notify(progress, "group", 0, 1, "group model")
    tables = _subject_tables(spec, subjects)
    if not tables:
        group_error = "no subject results to pool"
        logger.warning("group level skipped: %s", group_error)
    else:
        participants = _participants(spec)
        model = GroupModel(**spec.group_options)
        try:
            group_result = model.fit(pd.concat(tables, ignore_index=True), participants)
            group_files = tuple(
                Path(p)
                for p in write_group_results(group_result, output / "group", provenance=provenance)
            )
            logger.info("group level: %s", ", ".join(p.name for p in group_files))
        except InputError as exc:  # e.g. a group left without subjects by failures
            group_error = one_line_error(exc)
            logger.error("group level failed: %s", group_error)
        except Exception as exc:  # the group stage failed; subject results stay valid
            group_error = one_line_error(exc)
            write_text_atomic(output / "group-error.log", _format_exception(exc))
            logger.error("group level failed: %s (traceback in group-error.log)", group_error)
    timings["group"] = round(time.perf_counter() - clock, 3)
    _notify(progress, "group", 1, 1, "group model")

    cohort_page = None
    if reports and group_result is not None:
        clock = time.perf_counter()
        _notify(progress, "cohort report", 0, 1, "cohort page")
        cohort_page = _cohort_page(spec, subjects, group_result, participants, provenance)
        timings["cohort_page"] = round(time.perf_counter() - clock, 3)
        _notify(progress, "cohort report", 1, 1, "cohort page")
    outcome = StudyOutcome(
        study=spec,
        subjects=subjects,
        group_files=group_files,
        group_error=group_error,
        cohort_page=cohort_page,
        seconds=time.perf_counter() - started,
        timings=timings,
    )
    _write_run_record(outcome)
    return outcome


def _cohort_page(spec, subjects, group_result, participants, provenance) -> Path | None:
    from fstats.report import cohort_report  # matplotlib only when pages are wanted

    pages = {}
    for s in subjects:
        if s.ok and "report" in s.files and s.participant_id not in pages:
            pages[s.participant_id] = f"subjects/{s.stem}/{s.files['report']}"
    failures = [
        {"participant_id": s.participant_id, "error": s.error} for s in subjects if not s.ok
    ]
    try:
        return Path(
            cohort_report(
                group_result,
                pages,
                spec.output_dir / "index.html",
                failures=failures,
                participants=participants,
                provenance=provenance,
                group_time_courses=_group_time_courses(spec, subjects, participants),
                title=spec.title,
            )
        )
    except InputError:
        raise
    except Exception as exc:  # a report problem must not lose the statistics
        logger.error("cohort page failed: %s", one_line_error(exc))
        write_text_atomic(spec.output_dir / "report-error.log", _format_exception(exc))
        return None


def _group_time_courses(spec, subjects, participants) -> pd.DataFrame | None:
    """Group-average response time courses from the subjects' stored course tables."""
    from fstats.report import average_time_courses  # matplotlib only when pages are wanted

    tables = []
    for s in subjects:
        if s.ok and "courses" in s.files:
            path = spec.output_dir / "subjects" / s.stem / s.files["courses"]
            tables.append(pd.read_csv(path, sep="\t", na_values=["n/a"], keep_default_na=False))
    if not tables:
        return None
    group_column = spec.group_options.get("group_column", "group")
    try:
        return average_time_courses(
            pd.concat(tables, ignore_index=True), participants, group_column=group_column
        )
    except Exception as exc:  # the page is still useful without the group time courses
        logger.warning("group time courses left out of the cohort page: %s", one_line_error(exc))
        return None


def _format_exception(exc: BaseException) -> str:
    return "".join(traceback.format_exception(type(exc), exc, exc.__traceback__))


def _write_subject_summary(output: Path, subjects: tuple[SubjectOutcome, ...]) -> None:
    table = pd.DataFrame(
        {
            "participant_id": [s.participant_id for s in subjects],
            "session": [s.session if s.session is not None else "n/a" for s in subjects],
            "stem": [s.stem for s in subjects],
            "status": [s.status for s in subjects],
            "seconds": [round(s.seconds, 3) for s in subjects],
            "error": [s.error or "n/a" for s in subjects],
        }
    )
    write_text_atomic(output / "subjects.tsv", table.to_csv(sep="\t", index=False))


def _write_run_record(outcome: StudyOutcome) -> None:
    spec = outcome.study
    record = {
        "study": str(spec.path),
        "title": spec.title,
        "fstats_version": _fstats_version(),
        "finished": datetime.now(UTC).isoformat(timespec="seconds"),
        "seconds": round(outcome.seconds, 3),
        "counts": {state: outcome.count(state) for state in ("computed", "reused", "failed")},
        "subjects": [
            {
                "participant_id": s.participant_id,
                "session": s.session,
                "stem": s.stem,
                "status": s.status,
                "error": s.error,
                "seconds": round(s.seconds, 3),
                "files": {k: f"subjects/{s.stem}/{v}" for k, v in s.files.items()},
            }
            for s in outcome.subjects
        ],
        "group": {
            "files": [
                p.relative_to(spec.output_dir).as_posix()
                for p in outcome.group_files
                if p.is_relative_to(spec.output_dir)
            ],
            "error": outcome.group_error,
        },
        "cohort_page": outcome.cohort_page.name if outcome.cohort_page else None,
        "timings": dict(outcome.timings),
    }
    write_json_atomic(spec.output_dir / "study.json", record)
