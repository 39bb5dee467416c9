"""Delimited text (TSV/CSV) with line numbers, and atomic writing, for the readers.

Every reader in :mod:`fstats.inputs` parses its file through :func:`read_delimited`, so
that errors can name the line and column of the offending cell.  Cells holding ``n/a``,
an empty string or ``nan`` are missing values (NaN in numeric columns).
"""

from __future__ import annotations

import csv
import io
import os
import uuid
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

from fstats.errors import InputError, suggest

__all__ = [
    "SEPARATORS",
    "MISSING_CELLS",
    "Table",
    "NumericTable",
    "separator_for",
    "read_delimited",
    "read_numeric",
    "float_column",
    "text_column",
    "require_columns",
    "format_number",
    "write_text_atomic",
]

#: Field separator by file extension.
SEPARATORS: dict[str, str] = {".tsv": "\t", ".csv": ","}
_SEPARATOR_NAMES = {"\t": "tab", ",": "comma", ";": "semicolon", "|": "pipe", " ": "space"}

#: Cell texts read as a missing value (compared after stripping, case-insensitive).
MISSING_CELLS: tuple[str, ...] = ("n/a", "", "nan")
_MISSING = frozenset(MISSING_CELLS)


@dataclass(frozen=True, eq=False)
class Table:
    """A delimited text file split into cells.

    Parameters
    ----------
    path : Path
        The file.
    header : tuple of str
        Column names from the first non-blank line.
    rows : list of list of str
        Data cells, stripped of surrounding white space.
    lines : ndarray of int, shape (n_rows,)
        1-based line number of each row in the file.
    """

    path: Path
    header: tuple[str, ...]
    rows: list[list[str]]
    lines: np.ndarray

    def index(self, name: str) -> int:
        """Column position of ``name``; raises ``ValueError`` when absent."""
        return self.header.index(name)


@dataclass(frozen=True, eq=False)
class NumericTable:
    """A delimited text file of numbers.

    Parameters
    ----------
    path : Path
        The file.
    header : tuple of str
        Column names.
    values : ndarray, shape (n_rows, n_columns)
        Cells as floats (NaN for missing cells).
    lines : ndarray of int, shape (n_rows,)
        1-based line number of each row in the file.
    """

    path: Path
    header: tuple[str, ...]
    values: np.ndarray
    lines: np.ndarray


_PANDAS_MISSING = ["n/a", "N/A", "nan", "NaN", "NAN", ""]
# pandas 3 parses floats exactly by default (and deprecates the option); pandas 2 needs it.
_EXACT_FLOATS = {} if int(pd.__version__.split(".")[0]) >= 3 else {"float_precision": "round_trip"}


def _read_numeric_fast(path: Path, complete: tuple[str, ...]) -> NumericTable | None:
    """The common case through pandas' C parser; None when anything needs a closer look."""
    try:
        sep = separator_for(path)
        text = path.read_text(encoding="utf-8-sig")
    except (InputError, OSError, UnicodeDecodeError):
        return None
    lines = text.splitlines()
    numbers = [i + 1 for i, line in enumerate(lines) if line.strip()]
    if len(numbers) < 2 or '"' in text:
        return None
    header = tuple(cell.strip() for cell in lines[numbers[0] - 1].split(sep))
    if "" in header or len(set(header)) != len(header) or len(header) < 2:
        return None
    body = [lines[n - 1] for n in numbers[1:]]
    if any(line.count(sep) != len(header) - 1 for line in body):
        return None
    try:
        frame = pd.read_csv(
            io.StringIO("\n".join(body)),
            sep=sep,
            header=None,
            dtype=float,
            na_values=_PANDAS_MISSING,
            keep_default_na=False,
            engine="c",
            **_EXACT_FLOATS,
        )
    except (ValueError, pd.errors.ParserError):
        return None
    values = frame.to_numpy(dtype=float)
    if values.shape != (len(body), len(header)):
        return None
    for name in complete:
        if name in header and np.isnan(values[:, header.index(name)]).any():
            return None
    return NumericTable(path, header, values, np.array(numbers[1:], dtype=int))


def read_numeric(path: str | Path, *, what: str, complete: tuple[str, ...] = ()) -> NumericTable:
    """A TSV/CSV table of numbers, with the checks of :func:`read_delimited`.

    Parameters
    ----------
    path : str or Path
        The file (separator by extension).
    what : str
        What the file should hold, for error messages.
    complete : tuple of str
        Columns that may not have missing cells.

    Raises
    ------
    InputError
        As :func:`read_delimited`, or naming the line and column of a cell that is
        not a number (or is missing in a ``complete`` column).
    """
    path = Path(path)
    fast = _read_numeric_fast(path, complete)
    if fast is not None:
        return fast
    table = read_delimited(path, what=what)
    values = np.column_stack(
        [float_column(table, name, allow_missing=name not in complete) for name in table.header]
    )
    return NumericTable(path, table.header, values, table.lines)


def separator_for(path: str | Path) -> str:
    """The field separator implied by a file's extension (``.tsv`` tab, ``.csv`` comma)."""
    suffix = Path(path).suffix.lower()
    if suffix not in SEPARATORS:
        raise InputError(
            path,
            "file name",
            "a '.tsv' (tab-separated) or '.csv' (comma-separated) file",
            Path(path).suffix or Path(path).name,
        )
    return SEPARATORS[suffix]


def read_delimited(path: str | Path, *, what: str, allow_empty: bool = False) -> Table:
    """Split a TSV or CSV file into header and cells, checking its shape.

    Parameters
    ----------
    path : str or Path
        The file; its extension (``.tsv``/``.csv``) sets the separator, which is
        checked against the header line.
    what : str
        What the file should hold, for error messages (``"a flow table"``).
    allow_empty : bool, default=False
        Accept a header without data rows.

    Raises
    ------
    InputError
        Missing or empty file, a header split by a different separator, blank or
        duplicated column names, a row with the wrong number of cells, or no data rows
        (unless ``allow_empty``).
    """
    path = Path(path)
    sep = separator_for(path)
    if not path.is_file():
        raise InputError(path, "file", f"an existing file with {what}", "no such file")
    try:
        text = path.read_text(encoding="utf-8-sig")
    except UnicodeDecodeError as exc:
        raise InputError(path, f"byte {exc.start}", "UTF-8 text", "undecodable bytes") from None
    numbered = [(i + 1, line) for i, line in enumerate(text.splitlines()) if line.strip()]
    if not numbered:
        raise InputError(path, "line 1", f"a header line of {what}", "an empty file")
    header_line = numbered[0][1]
    if sep not in header_line:
        others = [s for s in _SEPARATOR_NAMES if s != sep and s in header_line.strip()]
        if others:
            raise InputError(
                path,
                "line 1 (header)",
                f"{_SEPARATOR_NAMES[sep]}-separated column names for a '{path.suffix}' file",
                f"{_SEPARATOR_NAMES[others[0]]}-separated header {header_line.strip()[:60]!r}",
                hint="use tabs in .tsv files and commas in .csv files, or rename the file",
            )
    parsed = list(csv.reader([line for _, line in numbered], delimiter=sep))
    header = tuple(cell.strip() for cell in parsed[0])
    for position, name in enumerate(header):
        if not name:
            raise InputError(path, f"line 1, column {position + 1}", "a column name", name)
        if name in header[:position]:
            raise InputError(path, f"line 1, column {position + 1}", "unique column names", name)
    rows = []
    for (line_number, _), cells in zip(numbered[1:], parsed[1:], strict=True):
        if len(cells) != len(header):
            raise InputError(
                path,
                f"line {line_number}",
                f"{len(header)} {_SEPARATOR_NAMES[sep]}-separated cells as in the header",
                f"{len(cells)} cells",
            )
        rows.append([cell.strip() for cell in cells])
    if not rows and not allow_empty:
        raise InputError(path, "line 2", f"data rows of {what} below the header", "no data rows")
    lines = np.array([n for n, _ in numbered[1:]], dtype=int)
    return Table(path=path, header=header, rows=rows, lines=lines)


def require_columns(table: Table, names: tuple[str, ...], *, what: str) -> None:
    """Refuse a table that lacks one of ``names``, suggesting the closest header name."""
    for name in names:
        if name not in table.header:
            near = suggest(name, table.header)
            raise InputError(
                table.path,
                "line 1 (header)",
                f"a column {name!r} in {what}",
                list(table.header),
                hint=near,
            )


def float_column(table: Table, name: str, *, allow_missing: bool = True) -> np.ndarray:
    """One column as floats; ``n/a``/empty/``nan`` cells become NaN.

    Raises
    ------
    InputError
        Naming the line and column of the first cell that is not a number (or a
        missing cell when ``allow_missing`` is False).
    """
    position = table.index(name)
    cells = [row[position] for row in table.rows]
    missing = [cell.lower() in _MISSING for cell in cells]
    try:
        values = np.array(
            ["nan" if m else c for c, m in zip(cells, missing, strict=True)], dtype=float
        )
    except ValueError:
        values = None
    if values is None or not allow_missing and any(missing):
        for row, (cell, is_missing) in enumerate(zip(cells, missing, strict=True)):
            if is_missing and allow_missing:
                continue
            try:
                if is_missing:
                    raise ValueError(cell)
                float(cell)
            except ValueError:
                expected = "a number (or 'n/a')" if allow_missing else "a number"
                raise InputError(
                    table.path, f"line {table.lines[row]}, column {name!r}", expected, cell
                ) from None
        if values is None:  # numpy refused a text that Python's float accepts
            values = np.array(
                [np.nan if m else float(c) for c, m in zip(cells, missing, strict=True)]
            )
    return values


def text_column(table: Table, name: str) -> list[str]:
    """One column as stripped strings (missing cells as ``""``)."""
    position = table.index(name)
    return ["" if row[position].lower() in _MISSING else row[position] for row in table.rows]


def format_number(value: float) -> str:
    """A float as the shortest text that reads back to the same value; NaN as ``n/a``."""
    value = float(value)
    if np.isnan(value):
        return "n/a"
    return repr(value)


def write_text_atomic(path: str | Path, text: str) -> Path:
    """Write text under a temporary name in the same folder, then rename it to ``path``."""
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    temporary = path.with_name(f".{path.name}.{uuid.uuid4().hex[:12]}.partial")
    try:
        with open(temporary, "x", encoding="utf-8", newline="") as stream:
            stream.write(text)
        os.replace(temporary, path)
    except BaseException:
        temporary.unlink(missing_ok=True)
        raise
    return path
