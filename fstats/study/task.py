"""One subject as one task: what it needs (paths, options) and what it returns.

A :class:`SubjectTask` carries file paths and settings only, never arrays, so a
task is small to send to a worker process or a Dask worker and each worker loads
one recording at a time.  :func:`analyse_subject` runs the stages for one
recording (read -> flow from g2 when needed -> design -> fit -> results -> subject
report) and writes everything into the task's private work folder; the engine
(:mod:`fstats.study.engine`) moves that folder into place and writes the done
marker.
"""

from __future__ import annotations

import contextlib
import dataclasses
import logging
import time
from collections.abc import Iterator
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from fstats.design import build_design, load_design
from fstats.errors import InputError, suggest
from fstats.fit import SubjectGLM, write_subject_results
from fstats.flow import flow_from_g2
from fstats.inputs import read_recording
from fstats.inputs.recording import Recording
from fstats.study.ledger import write_text_atomic

__all__ = ["SubjectTask", "SubjectOutcome", "OUTCOME_STATES", "analyse_subject"]

logger = logging.getLogger(__name__)

#: What happened to a subject in a run: ``computed`` now, ``reused`` from an
#: earlier run (its done marker matched), or ``failed`` (with a one-line error).
OUTCOME_STATES: tuple[str, ...] = ("computed", "reused", "failed")

#: File name of a subject's HTML page inside its folder.
REPORT_NAME = "report.html"


@dataclass(frozen=True)
class SubjectTask:
    """Everything one worker needs to analyse one recording (paths and settings only).

    Parameters
    ----------
    participant_id : str
        Participant id (``"sub-01"``).
    session : str or None
        Run/session label, where the cohort has several per participant.
    stem : str
        Recording stem (file name before ``_flow.tsv`` / ``_dcs.snirf``); names the
        subject folder ``<output>/subjects/<stem>/``.
    recording_path : str
        Main data file (flow table or SNIRF).
    design_path : str
        Design YAML file.
    output_dir : str
        Final subject folder.
    work_dir : str
        Private folder the task writes into; moved onto ``output_dir`` when done.
    key : str
        Hash of the input files and options (see :func:`fstats.study.ledger.options_key`).
    inputs : dict of str to str
        Input file path -> SHA-256, recorded in the done marker and the results sidecar.
    short_channels : tuple of str or None
        Channels to treat as short-separation, overriding the recording's roles;
        ``None`` keeps them.
    long_channels : tuple of str or None
        Long channels to fit; ``None`` fits every long channel.
    short_threshold_cm : float or None
        Separation (cm) at or below which a channel counts as short when the
        channels sidecar gives no role; ``None`` uses the reader's default.
    fit_options : dict
        Keyword overrides for :class:`fstats.fit.SubjectGLM` on top of the
        design file's fit options.
    reports : bool
        Write the subject's HTML page.
    provenance : dict
        Study-level provenance (study file, fstats version) added to the results sidecar.
    """

    participant_id: str
    session: str | None
    stem: str
    recording_path: str
    design_path: str
    output_dir: str
    work_dir: str
    key: str
    inputs: dict = field(default_factory=dict)
    short_channels: tuple[str, ...] | None = None
    long_channels: tuple[str, ...] | None = None
    short_threshold_cm: float | None = None
    fit_options: dict = field(default_factory=dict)
    reports: bool = True
    provenance: dict = field(default_factory=dict)


@dataclass(frozen=True)
class SubjectOutcome:
    """What a task produced.

    Parameters
    ----------
    participant_id, session, stem : str, str or None, str
        As in the task.
    status : {"computed", "reused", "failed"}
        See :data:`OUTCOME_STATES`.
    error : str
        One-line error for a failed subject (``InputError`` message, or exception
        type and message); empty otherwise.
    files : dict of str to str
        Output files by role (``"results"``, ``"sidecar"``, ``"report"``,
        ``"traceback"``), as paths relative to the subject folder.
    seconds : float
        Wall time of the task in seconds (0 for a reused subject).
    messages : tuple of (int, str, str)
        Log records and warnings the task emitted: (level, logger name, message),
        replayed by the main process.
    stage_seconds : dict of str to float
        Wall time of each step in seconds (``read``, ``flow``, ``design``, ``fit``,
        ``write``, ``report``), for finding the slow stage.
    """

    participant_id: str
    session: str | None
    stem: str
    status: str
    error: str = ""
    files: dict = field(default_factory=dict)
    seconds: float = 0.0
    messages: tuple = ()
    stage_seconds: dict = field(default_factory=dict)

    @property
    def ok(self) -> bool:
        """True unless the subject failed."""
        return self.status != "failed"


def _with_channel_roles(recording: Recording, task: SubjectTask) -> Recording:
    """The recording with the study file's short-channel override applied."""
    names = recording.channel_names
    wanted = list(task.short_channels or ()) + list(task.long_channels or ())
    for name in wanted:
        if name not in names:
            raise InputError(
                task.recording_path,
                "channels",
                f"a channel named in the study file (one of {list(names)})",
                name,
                hint=suggest(name, names),
            )
    if task.short_channels is None:
        return recording
    short = set(task.short_channels)
    channels = tuple(dataclasses.replace(c, is_short=c.name in short) for c in recording.channels)
    return dataclasses.replace(recording, channels=channels)


def _needs_flow_from_g2(recording: Recording) -> bool:
    """True when the recording holds g2 curves but no usable flow."""
    if recording.g2 is None:
        return False
    if recording.provenance.get("flow_missing"):  # set by the SNIRF reader
        return True
    flow = np.asarray(recording.flow)
    return flow.size == 0 or bool(np.all(np.isnan(flow)))


def analyse_subject(task: SubjectTask) -> SubjectOutcome:
    """Run one recording through every subject-level stage, writing into ``task.work_dir``.

    Steps: read the recording (flow table or SNIRF); apply the study file's
    channel roles; derive flow from g2 when the recording has g2 curves but no
    flow; load and build the design; fit the subject GLM (design fit options,
    then the study's overrides); write the tidy results table and JSON sidecar;
    write the subject's HTML page when ``task.reports``.

    Parameters
    ----------
    task : SubjectTask
        Paths and settings for one recording.

    Returns
    -------
    SubjectOutcome
        Status ``"computed"`` with the written files (relative to the subject folder).

    Raises
    ------
    InputError
        For a recording or design the stages reject; any other exception is a
        failure too.  The engine records both as the subject's one-line error.
    """
    work_dir = Path(task.work_dir)
    clock = _StageClock()
    read_options = {}
    if task.short_threshold_cm is not None:
        read_options["short_threshold_cm"] = task.short_threshold_cm
    with clock("read"):
        recording = read_recording(task.recording_path, **read_options)
        if recording.subject is None:
            recording = dataclasses.replace(recording, subject=task.participant_id)
        recording = _with_channel_roles(recording, task)
    if _needs_flow_from_g2(recording):
        logger.info("%s: deriving flow from g2 curves", task.stem)
        with clock("flow"):
            recording = flow_from_g2(recording)
    with clock("design"):
        spec = load_design(task.design_path)
        design = build_design(spec, recording)
    design_options = dict(getattr(spec, "fit_options", {}) or {})
    with clock("fit"):
        glm = _subject_glm(design_options, task)
        fit = glm.fit(recording, design, channels=task.long_channels)
    provenance = dict(task.provenance)
    provenance["inputs"] = dict(task.inputs)
    if hasattr(spec, "model_dump"):  # the design as declared, beside its path and hash
        provenance["design"] = {
            **dict(provenance.get("design", {})),
            "declared": spec.model_dump(mode="json"),
        }
    provenance["options"] = {**design_options, **task.fit_options}
    with clock("write"):
        tsv_path, json_path = write_subject_results(fit, work_dir, task.stem, provenance=provenance)
    files = {"results": Path(tsv_path).name, "sidecar": Path(json_path).name}
    courses = work_dir / f"{task.stem}_timecourses.tsv"  # written beside them by the fit stage
    if courses.is_file():
        files["timecourses"] = courses.name
    if task.reports:
        from fstats.report import subject_report  # matplotlib only when pages are wanted

        with clock("report"):
            page = subject_report(
                recording, design, fit, work_dir / REPORT_NAME, provenance=provenance
            )
        files["report"] = Path(page).relative_to(work_dir).as_posix()
        files["courses"] = _write_time_courses(fit, recording, task, work_dir)
    return SubjectOutcome(
        participant_id=task.participant_id,
        session=task.session,
        stem=task.stem,
        status="computed",
        files=files,
        stage_seconds=clock.seconds,
    )


def _write_time_courses(fit, recording: Recording, task: SubjectTask, work_dir: Path) -> str:
    """Write the subject's response time courses (for the cohort page's group averages)."""
    from fstats.report import subject_time_courses  # matplotlib only when pages are wanted

    courses = subject_time_courses(fit, recording, participant_id=task.participant_id)
    name = f"{task.stem}_courses.tsv"
    write_text_atomic(work_dir / name, courses.to_csv(sep="\t", index=False, na_rep="n/a"))
    return name


class _StageClock:
    """Times named steps: ``with clock("fit"): ...`` adds to ``clock.seconds["fit"]``."""

    def __init__(self) -> None:
        self.seconds: dict[str, float] = {}

    @contextlib.contextmanager
    def __call__(self, name: str) -> Iterator[None]:
        started = time.perf_counter()
        try:
            yield
        finally:
            elapsed = time.perf_counter() - started
            self.seconds[name] = round(self.seconds.get(name, 0.0) + elapsed, 4)


def _subject_glm(design_options: dict, task: SubjectTask) -> SubjectGLM:
    """A ``SubjectGLM`` from the design's fit options overridden by the study's.

    Without reports nothing shows the block-averaged time courses, so they are
    not computed (they cost more than the GLM itself) unless an option asks for them.
    """
    options = {**design_options, **task.fit_options}
    known = {f.name for f in dataclasses.fields(SubjectGLM)}
    if not task.reports and "block_averages" in known:
        options.setdefault("block_averages", False)
    for name in options:
        if name not in known:
            raise InputError(
                task.design_path,
                f"fit.{name}",
                f"a fit option (one of {sorted(known)})",
                name,
                hint=suggest(name, known),
            )
    try:
        return SubjectGLM(**options)
    except InputError:
        raise
    except (TypeError, ValueError) as exc:
        raise InputError(
            task.design_path, "fit", "valid fit options", options, hint=str(exc)
        ) from exc
