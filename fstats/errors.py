"""Error and warning classes shared by every stage of fstats.

`InputError` is the one exception that user-facing code is expected to catch: it
describes a problem with a study file (which file, where in it, what was expected
and what was found).  The command line turns it into a one-line message and exit
code 2.  Conditions that do not stop an analysis (a nearly collinear design, an
AR fit that did not settle, a repaired timestamp) are warnings of the classes below.
"""

from __future__ import annotations

import difflib
from collections.abc import Iterable
from os import PathLike

__all__ = [
    "InputError",
    "FstatsWarning",
    "InputRepairWarning",
    "DesignWarning",
    "FitWarning",
    "QualityWarning",
    "suggest",
]


class InputError(ValueError):
    """A study file or argument does not hold what fstats expects.

    Parameters
    ----------
    path : str or path-like
        The file (or command-line argument) at fault.
    where : str
        Where in it: ``"line 14, column 'duration'"``, a dotted YAML key such as
        ``"contrasts.task_vs_rest"``, or a SNIRF group such as ``"/nirs/data1/dataTimeSeries"``.
    expected : str
        What fstats expected there, in plain words.
    found : object
        What was found instead (shown with ``repr``).
    hint : str, optional
        A remedy or a "did you mean" suggestion, appended to the message.

    Notes
    -----
    The message is always a single line:
    ``"<path>, <where>: expected <expected>, found <found>[; <hint>]"``.
    """

    def __init__(
        self,
        path: str | PathLike[str],
        where: str,
        expected: str,
        found: object,
        hint: str | None = None,
    ) -> None:
        self.path = str(path)
        self.where = where
        self.expected = expected
        self.found = found
        self.hint = hint
        found_text = repr(found)
        if len(found_text) > 120:
            found_text = found_text[:117] + "..."
        message = f"{self.path}, {where}: expected {expected}, found {found_text}"
        if hint:
            message += f"; {hint}"
        super().__init__(" ".join(message.split()))  # guarantee one line

    def __reduce__(self):  # keep the exception picklable across processes
        return (type(self), (self.path, self.where, self.expected, self.found, self.hint))


class FstatsWarning(UserWarning):
    """Base class of every warning fstats issues."""


class InputRepairWarning(FstatsWarning):
    """An input problem was repaired safely (e.g. duplicated timestamps dropped)."""


class DesignWarning(FstatsWarning):
    """A design matrix is rank deficient or a task regressor is nearly collinear."""


class FitWarning(FstatsWarning):
    """A model fit did not settle or a channel could not be fitted."""


class QualityWarning(FstatsWarning):
    """Signal quality is poor (low counts, failed g2 fits, heavy motion)."""


def suggest(word: str, choices: Iterable[str]) -> str | None:
    """A "did you mean" hint for a mistyped key or name, or ``None``.

    Parameters
    ----------
    word : str
        What the user wrote.
    choices : iterable of str
        The valid spellings.

    Returns
    -------
    str or None
        ``"did you mean 'x'?"`` for the closest valid spelling, or ``None`` when
        nothing is close.
    """
    matches = difflib.get_close_matches(str(word), list(choices), n=1, cutoff=0.6)
    return f"did you mean {matches[0]!r}?" if matches else None
