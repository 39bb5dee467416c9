"""``fstats demo``: simulate the built-in demo cohort and run the whole study on it."""

from __future__ import annotations

import argparse
import logging
from pathlib import Path

import yaml

from fstats.cli._types import positive_int
from fstats.errors import InputError

__all__ = ["register", "find_demo_study"]

logger = logging.getLogger(__name__)

_DESCRIPTION = """\
Run fstats end to end on its built-in simulated demo: a cohort of adults in two groups
('younger', 'older') doing serial-subtraction mental arithmetic in blocks (20 s rest,
40 s 'subtract', 25 s 'recover', repeated), recorded with a 1.0 cm scalp channel and two
3.0 cm brain-sensitive channels (BFi in cm²/s at 20 Hz). The demo writes the simulated
cohort with its ground truth, fits every subject (short-separation, cardiac and drift
regressors, AR-IRLS), pools the cohort (older minus younger, random effects, FDR), and
writes one HTML page per subject and a cohort page. Nothing is downloaded: the data are
simulated by fstats itself."""

_EPILOG = """\
outputs (in OUT, default ./reports):
  demo-cohort/            the simulated cohort: participants.tsv, ground_truth.json, sub-XX/
  demo-study.yaml         the study file that was run (from designs/study_demo.yaml)
  demo-study/index.html   cohort page (open it in a browser)
  demo-study/subjects/    per-subject results (TSV + JSON) and pages
  demo-study/group/       group tables (TSV + JSON)

fstats is a research tool, not a diagnostic device."""


def find_demo_study() -> Path:
    """The demo study file ``designs/study_demo.yaml`` (current folder, then the source tree).

    Raises
    ------
    InputError
        If neither place has it (a non-editable install without the source tree).
    """
    candidates = [
        Path.cwd() / "designs" / "study_demo.yaml",
        Path(__file__).resolve().parents[2] / "designs" / "study_demo.yaml",
    ]
    for path in candidates:
        if path.is_file():
            return path
    raise InputError(
        candidates[-1],
        "file",
        "the demo study file of the fstats source tree",
        "no such file",
        hint="run the demo from a clone of fstats installed with 'pip install -e .'",
    )


def _study_for(out_dir: Path, template: Path) -> Path:
    """Write the demo study file with its paths pointed into ``out_dir``."""
    with template.open() as handle:
        study = yaml.safe_load(handle)
    design = (template.parent / study["design"]).resolve()
    study.update(
        cohort=str((out_dir / "demo-cohort").resolve()),
        design=str(design),
        output=str((out_dir / "demo-study").resolve()),
    )
    path = out_dir / "demo-study.yaml"
    tmp = path.with_name(path.name + ".tmp")
    tmp.write_text(
        "# Written by 'fstats demo' from designs/study_demo.yaml; paths point into this folder.\n"
        + yaml.safe_dump(study, sort_keys=False)
    )
    tmp.replace(path)
    return path


def register(subparsers: argparse._SubParsersAction) -> None:
    """Add the ``demo`` subcommand."""
    parser = subparsers.add_parser(
        "demo",
        help="simulate the built-in demo cohort and run the whole study on it",
        description=_DESCRIPTION,
        epilog=_EPILOG,
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    parser.add_argument(
        "--out",
        type=Path,
        default=Path("reports"),
        metavar="OUT",
        help="folder for the simulated cohort, the study outputs and the pages (default: reports)",
    )
    parser.add_argument(
        "--subjects-per-group",
        type=positive_int(),
        default=6,
        metavar="N",
        help="simulated subjects in each of the two groups (default: 6)",
    )
    parser.add_argument(
        "--seed", type=int, default=2026, help="seed of the simulation (default: 2026)"
    )
    parser.add_argument(
        "--workers",
        type=positive_int(),
        metavar="N",
        help="worker processes for the subject fits (default: one per CPU core)",
    )
    parser.add_argument(
        "--no-reports", action="store_true", help="write statistics only, no HTML pages"
    )
    parser.set_defaults(func=_demo)


def _demo(args: argparse.Namespace) -> int:
    from fstats.cli._run import _progress, _summary
    from fstats.simulate.cohort import simulate_cohort
    from fstats.study import run_study

    out_dir: Path = args.out
    out_dir.mkdir(parents=True, exist_ok=True)
    study_path = _study_for(out_dir, find_demo_study())
    logger.info("simulating %d subjects per group into %s", args.subjects_per_group, out_dir)
    simulate_cohort(out_dir / "demo-cohort", n_per_group=args.subjects_per_group, seed=args.seed)
    with _progress() as bars:
        outcome = run_study(
            study_path, workers=args.workers, reports=not args.no_reports, progress=bars
        )
    _summary(outcome)
    print(f"demo cohort (with ground_truth.json): {(out_dir / 'demo-cohort').resolve()}")
    if outcome.cohort_page is not None:
        print(f"open the cohort page in a browser: {Path(outcome.cohort_page).resolve()}")
    return outcome.exit_code
