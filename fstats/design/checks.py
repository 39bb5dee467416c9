"""Checks of a schema-valid design that a schema cannot express.

Labels that match conditions, segments that do not overlap, parameters that belong to the
chosen response model, contrasts over declared conditions, consistent nuisance options and
fit options.  Each failure is a one-line :class:`fstats.errors.InputError` naming the file,
line and dotted key (from :meth:`DesignSpec.where`).
"""

from __future__ import annotations

import re

from fstats.design.spec import FIT_METHODS, DesignSpec
from fstats.errors import InputError, suggest

__all__ = ["check_design", "task_column_names"]

_RESPONSE_PARAMS = {
    "flow": {"peak_s", "shape", "lag_s"},
    "gamma_variate": {"peak_s", "shape", "lag_s"},
    "glover": set(),
    "canonical": set(),
    "boxcar": {"lag_s"},
    "fir": {"bin_s", "n_bins"},
}


def task_column_names(spec: DesignSpec) -> dict[str, tuple[str, ...]]:
    """The task columns each condition of a design will get, by condition.

    Main column ``<condition>``; derivatives ``<condition>_dt`` and
    ``<condition>_dd``; a parametric modulator ``<condition>_amp``; FIR bins
    ``<condition>_fir00``, ``<condition>_fir01``, ...
    """
    out = {}
    for name, cond in spec.conditions.items():
        if cond.response.model == "fir":
            n = cond.response.n_bins or 0
            cols = tuple(f"{name}_fir{j:02d}" for j in range(n))
        else:
            cols = (name,)
            cols += tuple(f"{name}_{'dt' if d == 'temporal' else 'dd'}" for d in cond.derivatives)
        if cond.amplitude == "modulate" and cond.response.model != "fir":
            cols += (f"{name}_amp",)
        out[name] = cols
    return out


def _fail(spec: DesignSpec, key_path: tuple, expected: str, found, hint=None):
    raise InputError(spec.source, spec.where(*key_path), expected, found, hint=hint)


def _check_timing(spec: DesignSpec) -> None:
    timing = spec.timing
    if (timing.cycle is None) == (timing.events is None):
        found = "both" if timing.cycle is not None else "neither"
        _fail(spec, ("timing",), "exactly one of 'cycle' or 'events'", found)
    labels: list[str] = []
    if timing.cycle is not None:
        end = 0.0
        for i, seg in enumerate(timing.cycle.segments):
            start = end if seg.at_s is None else seg.at_s
            if start < end - 1e-9:
                _fail(
                    spec,
                    ("timing", "cycle", "segments", i, "at_s"),
                    f"a start at or after the previous segment's end ({end:g} s)",
                    seg.at_s,
                    hint="segments of a cycle may not overlap",
                )
            end = start + seg.length_s
            labels.append(seg.label)
        period = timing.cycle.period_s
        if period is not None and period < end - 1e-9:
            _fail(
                spec,
                ("timing", "cycle", "period_s"),
                f"a period at least as long as the segments ({end:g} s)",
                period,
            )
        known = set(spec.conditions) | set(spec.baseline)
        for i, seg in enumerate(timing.cycle.segments):
            if seg.label not in known:
                _fail(
                    spec,
                    ("timing", "cycle", "segments", i, "label"),
                    "a label declared under 'conditions' or listed in 'baseline'",
                    seg.label,
                    hint=suggest(seg.label, known),
                )
        for name in spec.conditions:
            if name not in labels:
                _fail(
                    spec,
                    ("conditions", name),
                    "a condition that is a segment label of timing.cycle",
                    name,
                    hint=suggest(name, labels),
                )
    else:
        ev = timing.events
        if ev.source == "file" and not ev.file:
            _fail(spec, ("timing", "events", "source"), "a 'file' key with source 'file'", None)
        if ev.source == "recording" and ev.file:
            _fail(
                spec,
                ("timing", "events", "file"),
                "no 'file' with source 'recording'",
                ev.file,
                hint="set source: file to read events from a file",
            )
    for i, label in enumerate(spec.baseline):
        if label in spec.conditions:
            _fail(spec, ("baseline", i), "a label that is not also a condition", label)


def _check_conditions(spec: DesignSpec) -> None:
    for name, cond in spec.conditions.items():
        if not re.match(r"^[A-Za-z][A-Za-z0-9_\-]*$", name):
            _fail(spec, ("conditions", name), "a name of letters, digits, '_' or '-'", name)
        resp = cond.response
        allowed = _RESPONSE_PARAMS[resp.model]
        for param in ("peak_s", "shape", "lag_s", "bin_s", "n_bins"):
            if getattr(resp, param) is not None and param not in allowed:
                _fail(
                    spec,
                    ("conditions", name, "response", param),
                    (
                        f"only the parameters {', '.join(sorted(allowed))}"
                        if allowed
                        else "no parameters"
                    )
                    + f" for response model {resp.model!r}",
                    param,
                )
        if resp.model == "fir":
            for param in ("bin_s", "n_bins"):
                if getattr(resp, param) is None:
                    _fail(
                        spec,
                        ("conditions", name, "response", param),
                        f"the key {param!r} for an FIR response",
                        "no such key",
                    )
        if resp.model in ("flow", "gamma_variate") and resp.peak_s is not None:
            if resp.peak_s <= (resp.lag_s or 0.0):
                _fail(
                    spec,
                    ("conditions", name, "response", "peak_s"),
                    "a peak time later than lag_s",
                    resp.peak_s,
                )
        if cond.derivatives and resp.model in ("boxcar", "fir"):
            _fail(
                spec,
                ("conditions", name, "derivatives"),
                f"no derivatives for response model {resp.model!r}",
                cond.derivatives,
            )
        if len(set(cond.derivatives)) != len(cond.derivatives):
            _fail(
                spec, ("conditions", name, "derivatives"), "each derivative once", cond.derivatives
            )


def _check_drift_nuisance(spec: DesignSpec) -> None:
    d = spec.drift
    if d.basis == "cosine" and d.order is not None:
        _fail(spec, ("drift", "order"), "'cutoff_s' (not 'order') for a cosine basis", d.order)
    if d.basis == "polynomial":
        if d.cutoff_s is not None:
            _fail(
                spec, ("drift", "cutoff_s"), "'order' (not 'cutoff_s') for polynomials", d.cutoff_s
            )
        if d.order is None:
            _fail(spec, ("drift", "order"), "the key 'order' for polynomial drift", "no such key")
    if d.basis == "none" and (d.order is not None or d.cutoff_s is not None):
        _fail(spec, ("drift", "basis"), "no drift parameters with basis 'none'", d.basis)
    card = spec.nuisance.cardiac
    if card is not None:
        if card.source == "aux" and not card.signal:
            _fail(spec, ("nuisance", "cardiac", "source"), "a 'signal' key with source 'aux'", None)
        if card.source != "aux" and card.signal:
            _fail(
                spec,
                ("nuisance", "cardiac", "signal"),
                "'channel' (not 'signal') with a flow source",
                card.signal,
            )
        if card.source == "aux" and card.channel:
            _fail(
                spec,
                ("nuisance", "cardiac", "channel"),
                "'signal' (not 'channel') with source 'aux'",
                card.channel,
            )
    motion = spec.nuisance.motion
    if motion is not None and motion.spikes is not None:
        if motion.spikes.detect_in == "accelerometer" and not motion.accelerometer:
            _fail(
                spec,
                ("nuisance", "motion", "spikes", "detect_in"),
                "accelerometer signals listed under nuisance.motion.accelerometer",
                "accelerometer",
            )


def _check_contrasts(spec: DesignSpec) -> None:
    columns = task_column_names(spec)
    valid = list(spec.conditions) + [c for cols in columns.values() for c in cols]
    names = list(spec.contrasts)

    def check_weights(weights: dict, key_path: tuple) -> None:
        if not weights:
            _fail(spec, key_path, "at least one weight", weights)
        for cond in weights:
            if cond not in valid:
                _fail(
                    spec,
                    key_path + (cond,),
                    "a declared condition or task column",
                    cond,
                    hint=suggest(cond, valid),
                )
        if all(w == 0 for w in weights.values()):
            _fail(spec, key_path, "a non-zero weight", weights)

    for name, con in spec.contrasts.items():
        if (con.weights is None) == (con.rows is None):
            _fail(
                spec,
                ("contrasts", name),
                "exactly one of 'weights' (t contrast) or 'rows' (F test)",
                "both" if con.weights is not None else "neither",
            )
        if con.weights is not None:
            check_weights(con.weights, ("contrasts", name, "weights"))
        else:
            if not con.rows:
                _fail(spec, ("contrasts", name, "rows"), "at least one row", con.rows)
            for i, row in enumerate(con.rows):
                if isinstance(row, dict):
                    check_weights(row, ("contrasts", name, "rows", i))
                elif row not in valid and row not in names:
                    _fail(
                        spec,
                        ("contrasts", name, "rows", i),
                        "a condition, task column or t-contrast name",
                        row,
                        hint=suggest(row, valid + names),
                    )
                elif row in names and spec.contrasts[row].weights is None:
                    _fail(spec, ("contrasts", name, "rows", i), "a t contrast (not an F test)", row)


def _check_fit_options(spec: DesignSpec) -> None:
    opts = spec.fit_options
    if "method" in opts and opts["method"] not in FIT_METHODS:
        _fail(
            spec,
            ("fit_options", "method"),
            "one of " + ", ".join(FIT_METHODS),
            opts["method"],
            hint=suggest(str(opts["method"]), FIT_METHODS),
        )
    if "max_ar_order" in opts:
        value = opts["max_ar_order"]
        if isinstance(value, bool) or not isinstance(value, int) or value < 0:
            _fail(spec, ("fit_options", "max_ar_order"), "a whole number >= 0", value)


def check_design(spec: DesignSpec) -> None:
    """Run every semantic check on a schema-valid design.

    Parameters
    ----------
    spec : DesignSpec
        A design validated by the schema.

    Raises
    ------
    InputError
        At the first inconsistency, naming file, line and key.
    """
    _check_timing(spec)
    _check_conditions(spec)
    _check_drift_nuisance(spec)
    _check_contrasts(spec)
    _check_fit_options(spec)
