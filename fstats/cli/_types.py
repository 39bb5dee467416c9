"""Argument types shared by the subcommands (argparse ``type=`` callables)."""

from __future__ import annotations

import argparse
from collections.abc import Callable

__all__ = ["positive_int"]


def positive_int(what: str = "a whole number") -> Callable[[str], int]:
    """An argparse type accepting whole numbers >= 1; ``what`` names them in the error."""

    def parse(text: str) -> int:
        try:
            value = int(text)
        except ValueError:
            value = 0
        if value < 1:
            raise argparse.ArgumentTypeError(f"expected {what} >= 1, found {text!r}")
        return value

    return parse
