"""Read a design file: YAML with line numbers, schema validation, semantic checks.

Every problem becomes a one-line :class:`fstats.errors.InputError` naming the
file, the line and the dotted key, with a "did you mean" hint for typos.
"""

from __future__ import annotations

import types
import typing
from os import PathLike
from pathlib import Path

import pydantic
import yaml

from fstats.design.checks import check_design
from fstats.design.spec import DesignSpec, dotted
from fstats.errors import InputError, suggest

__all__ = ["load_design", "parse_design"]


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
            if "'\\t'" in problem or "\t" in problem:
                hint = "indent YAML with spaces, not tabs"
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
    # an unknown key is reported before a missing one: a typo usually causes both
    errors = sorted(exc.errors(), key=lambda e: e["type"] != "extra_forbidden")
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
    check_design(spec)
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
