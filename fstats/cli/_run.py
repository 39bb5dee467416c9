"""``fstats run`` and ``fstats regroup``: a whole study from its study file."""

from __future__ import annotations

import argparse
import contextlib
import logging
import sys
from collections.abc import Iterator

from fstats.cli._types import positive_int

__all__ = ["register"]

_STUDY_HELP = (
    "study file (YAML): cohort folder or list of recordings, design file, channel roles, "
    "group model, corrections, output folder; relative paths are resolved against its folder"
)

_LAYOUT = """\
outputs (in the study file's output folder):
  subjects/<stem>/<stem>_glm.tsv, .json       subject GLM results (estimates in cm²/s and %)
  subjects/<stem>/report.html                 subject page (unless --no-reports)
  subjects/<stem>/done.json                   done marker: hash of inputs and options
  subjects/<stem>/failed.json, error.log      a failed subject's one-line error and traceback
  group/                                      group tables (TSV + JSON sidecar)
  index.html                                  cohort page (unless --no-reports)
  subjects.tsv, study.json                    status of every recording in the last run

exit status: 0 every subject and the group level succeeded; 1 some failed (everything
else is still written); 2 bad input (study file, design, options)."""


def register(subparsers: argparse._SubParsersAction) -> None:
    """Add the ``run`` and ``regroup`` subcommands."""
    run = subparsers.add_parser(
        "run",
        help="analyse a whole study: every recording, the group model and the reports",
        description=(
            "Run a study end to end: each recording through reading, flow from g2 (when "
            "the recording has g2 curves but no flow), the design, the subject GLM and its "
            "page, as independent tasks on local worker processes or a Dask cluster; then "
            "the group model and the cohort page. Recordings whose inputs (file SHA-256) "
            "and options (design file, fit options, fstats version) are unchanged since a "
            "finished earlier run are reused, so an interrupted run resumes where it "
            "stopped. A failing recording is recorded with a one-line error and the run "
            "goes on."
        ),
        epilog=_LAYOUT,
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    run.add_argument("study", metavar="STUDY.yaml", help=_STUDY_HELP)
    run.add_argument(
        "--workers",
        type=positive_int("a number of workers"),
        metavar="N",
        help="worker processes (default: the study file's 'workers', else one per CPU core)",
    )
    run.add_argument(
        "--scheduler",
        metavar="ADDRESS|local-cluster",
        help=(
            "run the subject tasks on Dask: a scheduler address (tcp://host:8786; the output "
            "folder must be visible to its workers) or 'local-cluster' to start one here with "
            "N workers (default: local worker processes)"
        ),
    )
    run.add_argument(
        "--no-reports",
        action="store_true",
        help="write statistics only, no HTML pages (overrides 'reports: true')",
    )
    run.add_argument(
        "--force",
        action="store_true",
        help="recompute every recording even when its stored results are up to date",
    )
    run.set_defaults(func=_run)

    again = subparsers.add_parser(
        "regroup",
        help="rerun only the group model and the cohort page from stored subject results",
        description=(
            "Rerun the group level and the cohort page of a study from the subject results "
            "a previous 'fstats run' stored in the output folder, e.g. after changing the "
            "study file's group model or corrections. Subjects are not refitted; recordings "
            "with no stored results are listed as failed."
        ),
        epilog=_LAYOUT,
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    again.add_argument("study", metavar="STUDY.yaml", help=_STUDY_HELP)
    again.add_argument(
        "--no-reports", action="store_true", help="write the group tables only, no cohort page"
    )
    again.set_defaults(func=_regroup)


class _Bars:
    """One tqdm progress bar per stage, fed by the study's progress hook."""

    def __init__(self) -> None:
        self._bars: dict = {}

    def __call__(self, event) -> None:
        from tqdm import tqdm

        bar = self._bars.get(event.stage)
        if bar is None:
            unit = "recording" if event.stage == "subjects" else "step"
            bar = tqdm(total=event.total, desc=f"{event.stage:>13}", unit=unit, leave=True)
            self._bars[event.stage] = bar
        bar.n = event.done
        bar.set_postfix_str(event.message, refresh=False)
        bar.refresh()
        if event.done >= event.total:
            bar.close()

    def close(self) -> None:
        for bar in self._bars.values():
            bar.close()


class _BarSafeHandler(logging.Handler):
    """Writes log lines above the progress bars instead of through them."""

    def __init__(self, formatter: logging.Formatter | None) -> None:
        super().__init__()
        if formatter is not None:
            self.setFormatter(formatter)

    def emit(self, record: logging.LogRecord) -> None:
        from tqdm import tqdm

        tqdm.write(self.format(record), file=sys.stderr)


@contextlib.contextmanager
def _progress() -> Iterator[_Bars | None]:
    """Bars on a terminal; plain log lines (from the library) otherwise."""
    package = logging.getLogger("fstats")
    if not sys.stderr.isatty() or package.getEffectiveLevel() > logging.INFO:
        yield None
        return
    bars = _Bars()
    loggers = [package, logging.getLogger("py.warnings")]
    saved = [list(lg.handlers) for lg in loggers]
    formatter = saved[0][0].formatter if saved[0] else None
    for lg in loggers:
        lg.handlers[:] = [_BarSafeHandler(formatter)]
    try:
        yield bars
    finally:
        bars.close()
        for lg, handlers in zip(loggers, saved, strict=True):
            lg.handlers[:] = handlers


def _summary(outcome) -> None:
    counts = ", ".join(f"{outcome.count(s)} {s}" for s in ("computed", "reused", "failed"))
    lines = [f"{outcome.study.title}: {len(outcome.subjects)} recordings ({counts})"]
    for failure in outcome.failures:
        lines.append(f"  failed {failure['stem']}: {failure['error']}")
    if outcome.group_files:
        lines.append(f"  group tables: {outcome.group_files[0].parent}")
    elif outcome.group_error:
        lines.append(f"  group level not written: {outcome.group_error}")
    if outcome.cohort_page is not None:
        lines.append(f"  cohort page: {outcome.cohort_page}")
    lines.append(f"  output: {outcome.study.output_dir} ({outcome.seconds:.1f} s)")
    print("\n".join(lines))


def _run(args: argparse.Namespace) -> int:
    from fstats.study import run_study

    with _progress() as bars:
        outcome = run_study(
            args.study,
            workers=args.workers,
            scheduler=args.scheduler,
            reports=not args.no_reports,
            force=args.force,
            progress=bars,
        )
    _summary(outcome)
    return outcome.exit_code


def _regroup(args: argparse.Namespace) -> int:
    from fstats.study import regroup

    with _progress() as bars:
        outcome = regroup(args.study, reports=not args.no_reports, progress=bars)
    _summary(outcome)
    return outcome.exit_code
