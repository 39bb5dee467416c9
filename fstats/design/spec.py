"""The design file schema (our own), as pydantic models.

A design file is YAML; :func:`fstats.design.load_design` reads it with
``yaml.safe_load`` semantics, validates it against :class:`DesignSpec` (unknown
keys are errors) and then checks what a schema cannot (labels that match,
contrasts over declared conditions, segments that do not overlap).  See
``designs/README.md`` for the documented schema.
"""

from __future__ import annotations

from typing import Any, Literal

from pydantic import BaseModel, ConfigDict, Field, PrivateAttr, field_validator

__all__ = [
    "DesignSpec",
    "TimingSpec",
    "CycleSpec",
    "SegmentSpec",
    "EventsSpec",
    "ConditionSpec",
    "ResponseSpec",
    "DriftSpec",
    "NuisanceSpec",
    "ShortChannelSpec",
    "CardiacSpec",
    "AuxSpec",
    "MotionSpec",
    "SpikeSpec",
    "ContrastSpec",
    "FIT_METHODS",
]

#: GLM methods the fit stage understands (``fit_options.method``).
FIT_METHODS: tuple[str, ...] = ("ols", "ar", "ar-irls")

_NAME = r"^[A-Za-z][A-Za-z0-9_\-]*$"


class _Strict(BaseModel):
    model_config = ConfigDict(extra="forbid", strict=True, frozen=True)


class SegmentSpec(_Strict):
    """One labelled stretch of the repeating cycle."""

    label: str = Field(pattern=_NAME)
    length_s: float = Field(gt=0)
    at_s: float | None = Field(
        default=None, ge=0
    )  # start within the cycle; default: after the previous


class CycleSpec(_Strict):
    """A block design as a repeating cycle of labelled segments."""

    segments: list[SegmentSpec] = Field(min_length=1)
    lead_in_s: float = Field(default=0.0, ge=0)
    period_s: float | None = Field(default=None, gt=0)
    repeats: int | None = Field(default=None, ge=1)


class EventsSpec(_Strict):
    """Events from the recording (events.tsv sidecar or SNIRF stims) or a named file.

    ``file`` may use the placeholders ``{stem}`` (the recording's stem, e.g.
    ``sub-01_task-cue``) and ``{dir}`` (the recording's folder); relative paths start at
    the design file's folder.
    """

    source: Literal["recording", "file"] = "recording"
    file: str | None = None
    rename: dict[str, str] = Field(default_factory=dict)
    ignore: list[str] = Field(default_factory=list)


class TimingSpec(_Strict):
    """Exactly one of ``cycle`` or ``events``."""

    cycle: CycleSpec | None = None
    events: EventsSpec | None = None


class ResponseSpec(_Strict):
    """Response model of a condition and its parameters."""

    model: Literal["flow", "gamma_variate", "glover", "canonical", "boxcar", "fir"] = "flow"
    peak_s: float | None = Field(default=None, gt=0)
    shape: float | None = Field(default=None, gt=1)
    lag_s: float | None = Field(default=None, ge=0)
    bin_s: float | None = Field(default=None, gt=0)
    n_bins: int | None = Field(default=None, ge=1)


class ConditionSpec(_Strict):
    """How one condition is modelled."""

    response: ResponseSpec = Field(default_factory=ResponseSpec)
    derivatives: list[Literal["temporal", "dispersion"]] = Field(default_factory=list)
    amplitude: Literal["scale", "modulate", "ignore"] = "scale"

    @field_validator("response", mode="before")
    @classmethod
    def _response_shorthand(cls, value: Any) -> Any:
        return {"model": value} if isinstance(value, str) else value


class DriftSpec(_Strict):
    """Slow drift model."""

    basis: Literal["cosine", "polynomial", "none"] = "cosine"
    cutoff_s: float | None = Field(default=None, gt=0)
    order: int | None = Field(default=None, ge=1)


class ShortChannelSpec(_Strict):
    """Short-separation channel regressors."""

    channels: list[str] | Literal["all"] = "all"
    zscore: bool = True
    lags_s: list[float] = Field(default_factory=list)


class CardiacSpec(_Strict):
    """RETROICOR cardiac regressors from detected heartbeats."""

    source: Literal["short", "long", "aux"] = "short"
    channel: str | None = None
    signal: str | None = None
    harmonics: int = Field(default=2, ge=1, le=6)


class AuxSpec(_Strict):
    """One auxiliary signal used as a regressor."""

    signal: str
    zscore: bool = True
    lags_s: list[float] = Field(default_factory=list)


class SpikeSpec(_Strict):
    """Spike indicators from jumps in a signal."""

    detect_in: str = "accelerometer"
    threshold_z: float = Field(default=6.0, gt=0)
    max_spikes: int = Field(default=50, ge=1)


class MotionSpec(_Strict):
    """Motion regressors: accelerometer axes and/or spike indicators."""

    accelerometer: list[str] = Field(default_factory=list)
    spikes: SpikeSpec | None = None


class NuisanceSpec(_Strict):
    """Nuisance regressors."""

    short_channels: ShortChannelSpec | None = None
    cardiac: CardiacSpec | None = None
    aux: list[AuxSpec] = Field(default_factory=list)
    motion: MotionSpec | None = None


class ContrastSpec(_Strict):
    """A t contrast (``weights``) or an F test (``rows``)."""

    weights: dict[str, float] | None = None
    rows: list[str | dict[str, float]] | None = None


class DesignSpec(_Strict):
    """A whole design file.

    Attributes
    ----------
    name : str
        Design name (defaults to the file stem).
    about : str
        Free text shown in reports.
    timing, baseline, conditions, drift, nuisance, contrasts
        See ``designs/README.md``.
    fit_options : dict
        Passed to the fit stage untouched (e.g. ``method``, ``max_ar_order``).
    """

    name: str = ""
    about: str = ""
    timing: TimingSpec
    baseline: list[str] = Field(default_factory=list)
    conditions: dict[str, ConditionSpec] = Field(min_length=1)
    drift: DriftSpec = Field(default_factory=DriftSpec)
    nuisance: NuisanceSpec = Field(default_factory=NuisanceSpec)
    contrasts: dict[str, ContrastSpec] = Field(default_factory=dict)
    fit_options: dict[str, Any] = Field(default_factory=dict)

    _source: str = PrivateAttr(default="<design>")
    _lines: dict = PrivateAttr(default_factory=dict)

    @property
    def source(self) -> str:
        """The file the design was read from (``"<design>"`` if built in Python)."""
        return self._source

    def where(self, *path: str | int) -> str:
        """Location text for a key path: ``"line 12, key 'drift.cutoff_s'"``."""
        return _where(self._lines, path)


def dotted(path: tuple) -> str:
    """Key path as text: ``("timing", "cycle", "segments", 1, "length_s")`` ->
    ``"timing.cycle.segments[1].length_s"``."""
    out = ""
    for part in path:
        if isinstance(part, int):
            out += f"[{part}]"
        else:
            out += ("." if out else "") + str(part)
    return out or "<top>"


def _where(lines: dict, path: tuple) -> str:
    path = tuple(path)
    for cut in range(len(path), -1, -1):
        line = lines.get(path[:cut])
        if line is not None:
            return f"line {line}, key {dotted(path)!r}"
    return f"key {dotted(path)!r}"
