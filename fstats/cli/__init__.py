"""The ``fstats`` command line: a thin shell over the Python API.

Each subcommand lives in its own module ``fstats/cli/_<name>.py`` exposing
``register(subparsers)``, which adds an ``argparse`` parser whose ``func``
default takes the parsed arguments and returns an exit code.  This module sets
up logging, turns :class:`fstats.errors.InputError` into a one-line message with
exit code 2, and never prints tracebacks for bad input.
"""

from __future__ import annotations

import argparse
import importlib
import logging
import sys
import warnings
from collections.abc import Sequence

from fstats.errors import InputError, InputRepairWarning

__all__ = ["main", "build_parser", "COMMAND_MODULES"]

#: Subcommand modules, in the order they appear in ``fstats --help``.
COMMAND_MODULES: tuple[str, ...] = (
    "_demo",
    "_simulate",
    "_inspect",
    "_flowfit",
    "_preview",
    "_fit",
    "_pool",
    "_run",
)

logger = logging.getLogger("fstats")


def build_parser() -> argparse.ArgumentParser:
    """The top-level argument parser with every available subcommand."""
    from fstats import __version__

    parser = argparse.ArgumentParser(
        prog="fstats",
        description=(
            "Statistics of functional-activation studies measured with diffuse correlation "
            "spectroscopy (DCS): flow series (BFi, cm²/s) or g2 curves and task timing in; "
            "design matrices, subject GLMs, group inference and HTML reports out. "
            "Research tool, not a diagnostic device."
        ),
    )
    parser.add_argument("--version", action="version", version=f"fstats {__version__}")
    verbosity = parser.add_mutually_exclusive_group()
    verbosity.add_argument("-v", "--verbose", action="store_true", help="log debug messages")
    verbosity.add_argument(
        "-q", "--quiet", action="store_true", help="log warnings and errors only"
    )
    subparsers = parser.add_subparsers(dest="command", metavar="COMMAND")
    for module_name in COMMAND_MODULES:
        try:
            module = importlib.import_module(f"fstats.cli.{module_name}")
        except ModuleNotFoundError as exc:  # a command still under construction
            if exc.name != f"fstats.cli.{module_name}":
                raise
            continue
        module.register(subparsers)
    return parser


def _setup_logging(verbose: bool, quiet: bool) -> None:
    level = logging.DEBUG if verbose else logging.WARNING if quiet else logging.INFO
    handler = logging.StreamHandler(sys.stderr)
    handler.setFormatter(logging.Formatter("%(levelname)s %(name)s: %(message)s"))
    root = logging.getLogger("fstats")
    root.handlers[:] = [handler]
    root.setLevel(level)
    root.propagate = False
    logging.captureWarnings(True)
    # the inputs stage logs every repair itself; don't show it a second time as a warning
    warnings.filterwarnings("ignore", category=InputRepairWarning)
    warnings_logger = logging.getLogger("py.warnings")
    warnings_logger.handlers[:] = [handler]
    warnings_logger.propagate = False


def main(argv: Sequence[str] | None = None) -> int:
    """Run the command line; returns the process exit code.

    Exit codes: 0 success, 1 the analysis ran but some subjects failed (or an
    internal error), 2 bad input or usage, 130 interrupted.
    """
    parser = build_parser()
    args = parser.parse_args(argv)
    _setup_logging(args.verbose, args.quiet)
    if not getattr(args, "func", None):
        parser.print_help()
        return 2
    try:
        return int(args.func(args) or 0)
    except InputError as exc:
        print(f"fstats {args.command}: error: {exc}", file=sys.stderr)
        return 2
    except KeyboardInterrupt:
        print(f"fstats {args.command}: interrupted", file=sys.stderr)
        return 130
    except Exception as exc:  # a bug, not bad input: one line, traceback only with --verbose
        if args.verbose:
            raise
        print(
            f"fstats {args.command}: internal error: {type(exc).__name__}: {exc} "
            "(rerun with --verbose for the traceback, and please report it)",
            file=sys.stderr,
        )
        return 1


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
