"""Read a design file: YAML with line numbers, schema validation, semantic checks.

Every problem becomes a one-line :class:`fstats.errors.InputError` naming the
file, the line and the dotted key, with a "did you mean" hint for typos.
"""

from __future__ import annotations

import re
import types
import typing
from os import PathLike
from pathlib import Path

import pydantic
import yaml

from fstats.design.spec import FIT_METHODS, DesignSpec, dotted
from fstats.errors import InputError, suggest

__all__ = ["load_design", "parse_design", "task_column_names"]

_RESPONSE_PARAMS = {
    "flow": {"peak_s", "shape", "lag_s"},
    "gamma_variate": {"peak_s", "shape", "lag_s"},
    "glover": set(),
    "canonical": set(),
    "boxcar": {"lag_s"},
    "fir": {"bin_s", "n_bins"},
}


# ---------------------------------------------------------------- YAML with lines
def _compose(text: str, path: str) -> tuple[object, dict]:
    """Parse YAML (safe constructors only) and map every key path to its line."""
    loader = yaml.SafeLoader(text)
    try:
        try:
            node = loader.get_single_node()
        except yaml.MarkedYAMLError as exc:
            mark = exc.problem_mark or exc.context_mark
            line = mark.line + 1 if mark else "?"
            problem = (exc.problem or "invalid YAML").strip()
            hint = None
            if exc.context_mark is not None and exc.context_mark.line + 1 != line:
                context = (exc.context or "the construct").strip()
                hint = f"{context} started at line {exc.context_mark.line + 1}"
            raise InputError(path, f"line {line}", "valid YAML", problem, hint=hint) from None
        except yaml.YAMLError as exc:
            raise InputError(path, "line ?", "valid YAML", str(exc).splitlines()[0]) from None
        if node is None:
            raise InputError(path, "line 1", "a design (a YAML mapping of keys)", "an empty file")
        lines: dict = {(): node.start_mark.line + 1}
        _walk(node, (), lines, path)
        try:
            data = loader.construct_document(node)
        except yaml.YAMLError as exc:
            mark = getattr(exc, "problem_mark", None)
            line = mark.line + 1 if mark else "?"
            raise InputError(
                path, f"line {line}", "plain YAML values", str(exc).split("\n")[0]
            ) from None
    finally:
        loader.dispose()
    return data, lines


def _walk(node, prefix: tuple, lines: dict, path: str) -> None:
    if isinstance(node, yaml.MappingNode):
        seen = set()
        for key_node, value_node in node.value:
            key = key_node.value if isinstance(key_node, yaml.ScalarNode) else str(key_node)
            if key in seen:
                raise InputError(
                    path,
                    f"line {key_node.start_mark.line + 1}, key {dotted(prefix + (key,))!r}",
                    "each key once",
                    key,
                    hint="remove the duplicate",
                )
            seen.add(key)
            lines[prefix + (key,)] = key_node.start_mark.line + 1
            _walk(value_node, prefix + (key,), lines, path)
    elif isinstance(node, yaml.SequenceNode):
        for i, item in enumerate(node.value):
            lines[prefix + (i,)] = item.start_mark.line + 1
            _walk(item, prefix + (i,), lines, path)


# ---------------------------------------------------------------- pydantic errors
def _unwrap(annotation):
    """Strip Optional / Union-with-None from an annotation."""
    origin = typing.get_origin(annotation)
    if origin in (typing.Union, types.UnionType):
        args = [a for a in typing.get_args(annotation) if a is not type(None)]
        models = [a for a in args if isinstance(a, type) and issubclass(a, pydantic.BaseModel)]
        if models:
            return models[0]
        lists = [a for a in args if typing.get_origin(a) in (list, dict)]
        return lists[0] if lists else args[0]
    return annotation


def _model_at(path: tuple):
    """The pydantic model class that validates the mapping at a key path, if any."""
    current = DesignSpec
    for part in path:
        current = _unwrap(current)
        if isinstance(current, type) and issubclass(current, pydantic.BaseModel):
            field = current.model_fields.get(part)
            if field is None:
                return None
            current = field.annotation
        elif typing.get_origin(current) is list:
            current = typing.get_args(current)[0]
        elif typing.get_origin(current) is dict:
            current = typing.get_args(current)[1]
        else:
            return None
    current = _unwrap(current)
    if isinstance(current, type) and issubclass(current, pydantic.BaseModel):
        return current
    return None


def _real_path(loc: tuple, lines: dict) -> tuple:
    real: list = []
    for part in loc:
        if tuple(real) + (part,) in lines:
            real.append(part)
    return tuple(real)


def _expected_text(error: dict) -> str:
    msg = error["msg"]
    for prefix in ("Input should be ", "Value error, ", "Assertion failed, "):
        if msg.startswith(prefix):
            msg = msg[len(prefix) :]
    if error["type"] in ("greater_than", "greater_than_equal", "less_than", "less_than_equal"):
        msg = "a number " + msg
    if error["type"] == "too_short":
        msg = "a non-empty list or mapping"
    return msg


def _raise_validation(exc: pydantic.ValidationError, path: str, lines: dict) -> None:
    errors = exc.errors()
    first = errors[0]
    real = _real_path(first["loc"], lines)
    loc = first["loc"]
    kind = first["type"]
    if kind == "missing":
        key_path = real + (loc[-1],)
        model = _model_at(real)
        where = f"line {lines.get(real, 1)}, key {dotted(key_path)!r}"
        raise InputError(path, where, f"the required key {loc[-1]!r}", "no such key") from None
    if kind == "extra_forbidden":
        key = loc[-1]
        model = _model_at(real[:-1])
        allowed = list(model.model_fields) if model else []
        hint = suggest(str(key), allowed)
        where = f"line {lines.get(real, '?')}, key {dotted(real)!r}"
        expected = "one of the keys " + ", ".join(allowed) if allowed else "a known key"
        raise InputError(path, where, expected, key, hint=hint) from None
    # several errors at the same place come from a union: list every option
    same = [e for e in errors if _real_path(e["loc"], lines) == real and e["type"] != "missing"]
    expected = " or ".join(dict.fromkeys(_expected_text(e) for e in same))
    found = first.get("input")
    hint = None
    if kind == "literal_error" and isinstance(found, str):
        options = [o.strip(" '") for o in _expected_text(first).replace(" or ", ", ").split(",")]
        hint = suggest(found, options)
    if isinstance(found, bool) and "string" in expected:
        hint = "quote it: YAML reads yes/no/on/off/true/false unquoted as true or false"
    where = f"line {lines.get(real, '?')}, key {dotted(real)!r}"
    raise InputError(path, where, expected, found, hint=hint) from None


# ---------------------------------------------------------------- semantic checks
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


def parse_design(text: str, path: str | PathLike[str] = "<design>") -> DesignSpec:
    """Validate the text of a design file.

    Parameters
    ----------
    text : str
        YAML text.
    path : str or path-like
        Name used in error messages.

    Returns
    -------
    DesignSpec

    Raises
    ------
    InputError
        One line naming the file, line and key, for bad YAML, unknown or missing
        keys, wrong types or values, and inconsistent declarations.
    """
    path = str(path)
    data, lines = _compose(text, path)
    if not isinstance(data, dict):
        raise InputError(path, "line 1", "a YAML mapping of design keys", type(data).__name__)
    try:
        spec = DesignSpec.model_validate(data)
    except pydantic.ValidationError as exc:
        _raise_validation(exc, path, lines)
    if not spec.name:
        spec = spec.model_copy(update={"name": Path(path).stem})
    spec._source = path
    spec._lines = lines
    _check_timing(spec)
    _check_conditions(spec)
    _check_drift_nuisance(spec)
    _check_contrasts(spec)
    _check_fit_options(spec)
    return spec


def load_design(path: str | PathLike[str]) -> DesignSpec:
    """Read and validate a YAML design file.

    Parameters
    ----------
    path : str or path-like
        The design file (``.yaml``/``.yml``).

    Returns
    -------
    DesignSpec
        The validated design; ``spec.source`` is the path and ``spec.where(...)``
        gives line numbers for later (recording-dependent) errors.

    Raises
    ------
    InputError
        If the file cannot be read or is not a valid design (one line naming the
        file, line and key; typos get a "did you mean").
    """
    p = Path(path)
    try:
        text = p.read_text(encoding="utf-8")
    except FileNotFoundError:
        raise InputError(p, "file", "an existing design file", str(p)) from None
    except (OSError, UnicodeDecodeError) as exc:
        raise InputError(p, "file", "a readable UTF-8 text file", type(exc).__name__) from None
    return parse_design(text, p)
