"""The study file: one YAML naming the recordings, design, channel roles, group model and output.

Schema (every key but ``design`` and ``output`` optional; unknown keys are errors)::

    title: Serial subtraction, younger vs older adults
    cohort: ../demo/cohort          # folder with participants.tsv and sub-*/ ...
    task: subtract                  # ... keeping only recordings whose name has _task-subtract
    # recordings:                   # ... or an explicit list instead of `cohort`
    #   - path: data/sub-01_task-subtract_flow.tsv
    #     participant_id: sub-01    # default: the sub-XX at the start of the file name
    #     session: "1"
    # participants: data/participants.tsv   # with `recordings`: covariates and groups
    design: subtract_blocks.yaml
    channels:
      short: scalp                  # short-separation channel name(s); default: sidecar role
      long: [frontal_a, frontal_b]  # long channels to fit; default every long channel
      short_threshold_cm: 1.5       # role by separation when the sidecar gives none
    fit: {}                         # overrides of the design file's fit options
    group:
      kind: two-sample              # fstats.group.GroupModel kind
      formula: null
      weighting: unweighted
      options: {}                   # further GroupModel keywords
    corrections:
      method: fdr
      alpha: 0.05
    output: ../results/subtract_demo
    reports: true
    workers: auto                   # or a number of worker processes

Relative paths are resolved against the folder of the study file.
"""

from __future__ import annotations

import dataclasses
import re
import typing
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Literal

import yaml
from pydantic import BaseModel, ConfigDict, Field, ValidationError, field_validator, model_validator

from fstats.design import load_design
from fstats.errors import InputError, suggest
from fstats.fit import SubjectGLM
from fstats.group import GroupModel
from fstats.inputs import find_recordings

__all__ = ["StudyRecording", "StudySpec", "load_study", "recording_stem"]

_STEM_SUFFIXES = ("_flow.tsv", "_flow.csv", "_dcs.snirf")
_PARTICIPANT = re.compile(r"^(sub-[A-Za-z0-9]+)")
_RUN = re.compile(r"_run-([A-Za-z0-9]+)")


class _Strict(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=True)


class _RecordingItem(_Strict):
    path: str
    participant_id: str | None = None
    session: str | None = None


class _Channels(_Strict):
    short: list[str] | None = None
    long: list[str] | None = None
    short_threshold_cm: float | None = Field(default=None, gt=0)

    @field_validator("short", "long", mode="before")
    @classmethod
    def _one_name_is_a_list(cls, value: object) -> object:
        return [value] if isinstance(value, str) else value


class _Group(_Strict):
    kind: str = "one-sample"
    formula: str | None = None
    weighting: str = "unweighted"
    options: dict[str, Any] = Field(default_factory=dict)


class _Corrections(_Strict):
    method: str = "fdr"
    alpha: float = Field(default=0.05, gt=0, lt=1)


class _StudyFile(_Strict):
    title: str | None = None
    cohort: str | None = None
    task: str | None = None
    recordings: list[_RecordingItem] | None = Field(default=None, min_length=1)
    participants: str | None = None
    design: str
    channels: _Channels = Field(default_factory=_Channels)
    fit: dict[str, Any] = Field(default_factory=dict)
    group: _Group = Field(default_factory=_Group)
    corrections: _Corrections = Field(default_factory=_Corrections)
    output: str
    reports: bool = True
    workers: int | Literal["auto"] = "auto"

    @field_validator("workers")
    @classmethod
    def _positive(cls, value: object) -> object:
        if isinstance(value, int) and value < 1:
            raise ValueError("a number of workers >= 1 or 'auto'")
        return value

    @model_validator(mode="after")
    def _one_source(self) -> _StudyFile:
        if (self.cohort is None) == (self.recordings is None):
            raise ValueError("exactly one of 'cohort' (a folder) or 'recordings' (a list)")
        return self


@dataclass(frozen=True)
class StudyRecording:
    """One recording of the study.

    Parameters
    ----------
    participant_id : str
        Participant id (``"sub-01"``).
    session : str or None
        Run/session label.
    stem : str
        File name before ``_flow.tsv`` / ``_flow.csv`` / ``_dcs.snirf``.
    path : Path
        Main data file.
    """

    participant_id: str
    session: str | None
    stem: str
    path: Path


@dataclass(frozen=True, eq=False)
class StudySpec:
    """A validated study file with every path resolved.

    Parameters
    ----------
    path : Path
        The study file.
    title : str
        Study title (the file name when not given).
    recordings : tuple of StudyRecording
        Recordings to analyse, sorted by stem.
    participants_path : Path or None
        ``participants.tsv`` (from the cohort folder or the ``participants`` key).
    design_path : Path
        Design YAML file.
    short_channels, long_channels : tuple of str or None
        Channel roles from ``channels.short`` / ``channels.long``.
    short_threshold_cm : float or None
        ``channels.short_threshold_cm`` (cm).
    fit_options : dict
        ``fit`` overrides.
    group_options : dict
        Keywords for :class:`fstats.group.GroupModel` (kind, formula, weighting,
        correction, alpha and ``group.options``).
    output_dir : Path
        Output folder.
    reports : bool
        Write HTML reports.
    workers : int or None
        Worker processes, ``None`` for "sized to the machine".
    """

    path: Path
    title: str
    recordings: tuple[StudyRecording, ...]
    participants_path: Path | None
    design_path: Path
    short_channels: tuple[str, ...] | None
    long_channels: tuple[str, ...] | None
    short_threshold_cm: float | None
    fit_options: dict = field(default_factory=dict)
    group_options: dict = field(default_factory=dict)
    output_dir: Path = Path("results")
    reports: bool = True
    workers: int | None = None


def recording_stem(path: str | Path) -> str:
    """The stem of a recording file: its name before ``_flow.tsv``/``_flow.csv``/``_dcs.snirf``."""
    name = Path(path).name
    for suffix in _STEM_SUFFIXES:
        if name.endswith(suffix):
            return name[: -len(suffix)]
    return Path(name).stem


def _line_of(node: yaml.Node | None, loc: tuple, *, key: bool) -> int | None:
    """1-based line of the YAML node at a pydantic error location, where it can be found."""
    line = None
    for index, part in enumerate(loc):
        if node is None:
            break
        last = index == len(loc) - 1
        if isinstance(node, yaml.MappingNode):
            match = next((kv for kv in node.value if kv[0].value == part), None)
            if match is None:
                break
            node = match[0] if (last and key) else match[1]
        elif isinstance(node, yaml.SequenceNode) and isinstance(part, int):
            if part >= len(node.value):
                break
            node = node.value[part]
        else:
            break
        line = node.start_mark.line + 1
    return line


def _model_at(model: type[BaseModel], loc: tuple) -> type[BaseModel] | None:
    """The pydantic model class that owns the last key of ``loc``."""
    current: object = model
    for part in loc[:-1]:
        if isinstance(part, int):
            continue
        if not (isinstance(current, type) and issubclass(current, BaseModel)):
            return None
        info = current.model_fields.get(part)
        if info is None:
            return None
        current = _inner_model(info.annotation)
    return current if isinstance(current, type) and issubclass(current, BaseModel) else None


def _inner_model(annotation: object) -> object:
    if isinstance(annotation, type) and issubclass(annotation, BaseModel):
        return annotation
    for arg in typing.get_args(annotation):
        found = _inner_model(arg)
        if found is not None:
            return found
    return None


def _error_from_validation(path: Path, exc: ValidationError, tree: yaml.Node | None) -> InputError:
    error = exc.errors()[0]
    loc = tuple(p for p in error["loc"] if not (isinstance(p, str) and p.startswith("function-")))
    # pydantic adds the union member name ("list[str]", "int") after the key; drop it
    loc = tuple(p for p in loc if not (isinstance(p, str) and ("[" in p or p in ("int", "str"))))
    dotted = ".".join(str(p) for p in loc) or "top level"
    kind = error["type"]
    hint = None
    if kind == "extra_forbidden":
        owner = _model_at(_StudyFile, loc)
        choices = list(owner.model_fields) if owner else []
        expected = f"one of the keys {choices}" if choices else "a known key"
        found: object = str(loc[-1]) if loc else error.get("input")
        hint = suggest(str(loc[-1]), choices) if loc else None
        line = _line_of(tree, loc, key=True)
    elif kind == "missing":
        expected = f"the required key {str(loc[-1])!r}" if loc else "a value"
        found = "nothing"
        line = None
    else:
        expected = error["msg"].removeprefix("Value error, ")
        found = error.get("input")
        line = _line_of(tree, loc, key=False)
    where = f"line {line}, key {dotted!r}" if line else f"key {dotted!r}"
    return InputError(path, where, expected, found, hint=hint)


def _participant_of(path: Path, given: str | None, study_path: Path, where: str) -> str:
    if given:
        return given
    match = _PARTICIPANT.match(path.name)
    if not match:
        raise InputError(
            study_path,
            where,
            "a participant_id, or a file name starting with sub-<label>",
            path.name,
        )
    return match.group(1)


def _resolve(base: Path, text: str) -> Path:
    return (base / Path(text).expanduser()).resolve()


def _from_cohort(
    folder: Path, task: str | None, study_path: Path
) -> tuple[tuple[StudyRecording, ...], Path | None]:
    if not folder.is_dir():
        raise InputError(
            study_path,
            "key 'cohort'",
            "an existing cohort folder",
            str(folder),
            hint="'fstats simulate' writes a simulated one",
        )
    entries = find_recordings(folder)
    recordings = [
        StudyRecording(e.participant_id, e.session, e.stem, Path(e.path)) for e in entries
    ]
    if task is not None:
        recordings = [r for r in recordings if f"_task-{task}" in r.stem]
    if not recordings:
        raise InputError(
            study_path,
            "key 'cohort'" if task is None else "key 'task'",
            "a cohort folder holding at least one recording"
            + ("" if task is None else f" of task {task!r}"),
            str(folder),
        )
    participants = folder / "participants.tsv"
    return tuple(recordings), participants if participants.is_file() else None


def load_study(path: str | Path) -> StudySpec:
    """Read and validate a study file, resolving its paths and listing its recordings.

    Parameters
    ----------
    path : str or path-like
        Study YAML file.

    Returns
    -------
    StudySpec
        The validated study, recordings sorted by stem.

    Raises
    ------
    InputError
        For an unreadable file, invalid YAML, an unknown or mistyped key (with the
        dotted key, its line and a "did you mean"), a missing design or cohort
        folder, or a group model the group stage rejects.
    """
    path = Path(path)
    try:
        text = path.read_text(encoding="utf-8")
    except OSError as exc:
        raise InputError(path, "file", "a readable study file", exc.strerror or str(exc)) from exc
    try:
        tree = yaml.compose(text)
        data = yaml.safe_load(text)
    except yaml.YAMLError as exc:
        mark = getattr(exc, "problem_mark", None)
        where = f"line {mark.line + 1}" if mark is not None else "file"
        raise InputError(path, where, "valid YAML", getattr(exc, "problem", str(exc))) from exc
    if not isinstance(data, dict):
        raise InputError(path, "top level", "a mapping of study keys", type(data).__name__)
    try:
        raw = _StudyFile.model_validate(data)
    except ValidationError as exc:
        raise _error_from_validation(path, exc, tree) from None
    base = path.resolve().parent

    if raw.cohort is not None:
        recordings, participants = _from_cohort(_resolve(base, raw.cohort), raw.task, path)
    else:
        items = []
        for i, item in enumerate(raw.recordings or ()):
            file = _resolve(base, item.path)
            where = f"key 'recordings.{i}.path'"
            if not file.is_file():
                raise InputError(path, where, "an existing recording file", item.path)
            match = _RUN.search(file.name)
            items.append(
                StudyRecording(
                    participant_id=_participant_of(file, item.participant_id, path, where),
                    session=item.session or (match.group(1) if match else None),
                    stem=recording_stem(file),
                    path=file,
                )
            )
        recordings = tuple(items)
        participants = None
    stems = [r.stem for r in recordings]
    duplicates = sorted({s for s in stems if stems.count(s) > 1})
    if duplicates:
        raise InputError(path, "key 'recordings'", "recordings with distinct stems", duplicates)
    if raw.participants is not None:
        participants = _resolve(base, raw.participants)
        if not participants.is_file():
            raise InputError(path, "key 'participants'", "an existing file", raw.participants)

    design = _resolve(base, raw.design)
    if not design.is_file():
        raise InputError(path, "key 'design'", "an existing design file", raw.design)
    group_options = {
        **{k: tuple(v) if isinstance(v, list) else v for k, v in raw.group.options.items()},
        "kind": raw.group.kind,
        "formula": raw.group.formula,
        "weighting": raw.group.weighting,
        "correction": raw.corrections.method,
        "alpha": raw.corrections.alpha,
    }
    _check_group_options(path, group_options)
    _check_design_and_fit(path, design, dict(raw.fit))
    channels = raw.channels
    return StudySpec(
        path=path.resolve(),
        title=raw.title or path.stem,
        recordings=tuple(sorted(recordings, key=lambda r: r.stem)),
        participants_path=participants,
        design_path=design,
        short_channels=tuple(channels.short) if channels.short is not None else None,
        long_channels=tuple(channels.long) if channels.long is not None else None,
        short_threshold_cm=channels.short_threshold_cm,
        fit_options=dict(raw.fit),
        group_options=group_options,
        output_dir=_resolve(base, raw.output),
        reports=raw.reports,
        workers=None if raw.workers == "auto" else int(raw.workers),
    )


#: Where a group-model setting lives in the study file.
_GROUP_KEYS = {
    "kind": "group.kind",
    "formula": "group.formula",
    "weighting": "group.weighting",
    "correction": "corrections.method",
    "alpha": "corrections.alpha",
}


def _check_group_options(path: Path, options: dict) -> None:
    """Build the group model once so a bad group section fails before any fitting."""
    known = {f.name for f in dataclasses.fields(GroupModel)}
    for name in options:
        if name not in known:
            raise InputError(
                path,
                f"key 'group.options.{name}'",
                f"a group model setting (one of {sorted(known)})",
                name,
                hint=suggest(name, known),
            )
    try:
        GroupModel(**options)
    except InputError as exc:
        key = _GROUP_KEYS.get(exc.where, f"group.options.{exc.where}")
        raise InputError(path, f"key {key!r}", exc.expected, exc.found, hint=exc.hint) from None
    except (TypeError, ValueError) as exc:
        raise InputError(
            path, "key 'group'", "a valid group model", options, hint=str(exc)
        ) from exc


def _check_design_and_fit(path: Path, design_path: Path, overrides: dict) -> None:
    """Load the design and build the subject GLM once, so bad options fail before any task."""
    spec = load_design(design_path)  # raises InputError naming the design file
    design_options = dict(getattr(spec, "fit_options", {}) or {})
    known = {f.name for f in dataclasses.fields(SubjectGLM)}
    for name in overrides:
        if name not in known:
            raise InputError(
                path,
                f"key 'fit.{name}'",
                f"a fit option (one of {sorted(known)})",
                name,
                hint=suggest(name, known),
            )
    for name in design_options:
        if name not in known:
            raise InputError(
                design_path,
                f"key 'fit_options.{name}'",
                f"a fit option (one of {sorted(known)})",
                name,
                hint=suggest(name, known),
            )
    try:
        SubjectGLM(**{**design_options, **overrides})
    except InputError as exc:
        source, key = (path, "fit") if exc.where in overrides else (design_path, "fit_options")
        raise InputError(
            source, f"key '{key}.{exc.where}'", exc.expected, exc.found, hint=exc.hint
        ) from None
    except (TypeError, ValueError) as exc:
        raise InputError(path, "key 'fit'", "valid fit options", overrides, hint=str(exc)) from exc
