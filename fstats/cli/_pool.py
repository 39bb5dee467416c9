"""``fstats pool``: subject results tables + participants.tsv -> group tables."""

from __future__ import annotations

import argparse
import hashlib
import sys
from pathlib import Path

import pandas as pd

from fstats.errors import InputError

__all__ = ["register", "find_result_tables", "read_result_tables"]

_DESCRIPTION = """\
Pool subject-level results across a cohort. Each subject results table (one per
recording, '<stem>_glm.tsv', as written by 'fstats fit') holds one row per channel x
term with the estimate in the flow's unit (cm²/s per unit regressor) and as % change from
baseline flow; the group model runs one test per channel x term, controls the error rate
across all of them, and writes a tidy group table with effect sizes (Hedges' g with
noncentral-t intervals), per-subject estimates for forest plots, a leave-one-out influence
check and every excluded subject or row with its reason."""

_EPILOG = """\
models (--model):
  one-sample    mean subject estimate vs 0, per channel x term
  two-sample    difference of group means (--group-column, --groups A,B gives A - B)
  paired        within-subject difference of two terms (--pair subtract,recover) vs 0
  interaction   within-subject difference (--pair) compared between two groups
  mixed         run-level estimates, random intercept per subject, fixed effects from
                --formula over participants.tsv columns, e.g. "effect ~ group + age"
weighting (--weighting, summary models): unweighted t tests, or weights 1/(se² + tau²)
  with tau² (between-subject variance) by dersimonian-laird or reml; Knapp-Hartung t
  reference unless --normal-reference. Several runs of a subject are averaged first.
correction (--correction): fdr (Benjamini-Hochberg), holm, bonferroni, none; applied across
  every row of the group table.

inputs:
  RESULTS              subject results TSV files, or folders searched for them (any
                       .tsv whose header has the subject results columns, e.g. *_glm.tsv)
  --participants FILE  participants.tsv: participant_id (sub-XX) + covariates ('n/a' =
                       missing); needed by two-sample, interaction and covariate models
outputs (in --out DIR, written under temporary names, then renamed):
  group_table.tsv             one row per channel x term x comparison: estimate, se, stat,
                              df, p, p_adjusted, reject, CI, effect size, n, tau2, I², ...
  group_table.json            model, options, exclusions, package versions, input hashes
  group_subject_estimates.tsv per-subject values and weights behind each test
  group_influence.tsv         leave-one-out estimates, DFBETAS, flagged subjects
  group_exclusions.tsv        participant_id, reason, channel, term, session
units: % change from baseline flow by default; --units raw pools cm²/s.
exit status: 0 done; 2 bad input (one line naming the file, field, expected and found)."""


def _pair(text: str) -> tuple[str, str]:
    parts = [p.strip() for p in text.split(",")]
    if len(parts) != 2 or not all(parts):
        raise argparse.ArgumentTypeError(f"expected two names separated by a comma, found {text!r}")
    return parts[0], parts[1]


def _names(text: str) -> tuple[str, ...]:
    parts = tuple(p.strip() for p in text.split(",") if p.strip())
    if not parts:
        raise argparse.ArgumentTypeError(f"expected comma-separated names, found {text!r}")
    return parts


def register(subparsers: argparse._SubParsersAction) -> None:
    """Add the ``pool`` subcommand."""
    from fstats.group import CORRECTIONS, KINDS, UNITS, WEIGHTINGS

    parser = subparsers.add_parser(
        "pool",
        help="pool subject results into group tables",
        description=_DESCRIPTION,
        epilog=_EPILOG,
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    parser.add_argument(
        "results",
        nargs="+",
        metavar="RESULTS",
        help="subject results .tsv files or folders containing them (e.g. *_glm.tsv)",
    )
    parser.add_argument(
        "--participants",
        metavar="FILE",
        type=Path,
        help="participants.tsv with participant_id and covariates",
    )
    parser.add_argument(
        "--out", metavar="DIR", type=Path, required=True, help="output folder (created if missing)"
    )
    parser.add_argument(
        "--model", choices=KINDS, default="one-sample", help="group model (default: one-sample)"
    )
    parser.add_argument("--formula", help='mixed model fixed effects, e.g. "effect ~ group + age"')
    parser.add_argument(
        "--weighting",
        choices=WEIGHTINGS,
        default="unweighted",
        help="subject weighting of summary models (default: unweighted)",
    )
    parser.add_argument(
        "--correction",
        choices=CORRECTIONS,
        default="fdr",
        help="multiple-comparison control across rows (default: fdr)",
    )
    parser.add_argument("--alpha", type=float, default=0.05, help="test level (default 0.05)")
    parser.add_argument(
        "--units",
        choices=UNITS,
        default="percent",
        help="pool %% change (percent, default) or raw cm²/s estimates",
    )
    parser.add_argument(
        "--terms",
        type=_names,
        metavar="A,B,...",
        help="terms to pool (default: task regressors and t contrasts)",
    )
    parser.add_argument(
        "--channels",
        type=_names,
        metavar="A,B,...",
        help="channels to pool (default: every long channel)",
    )
    parser.add_argument(
        "--include-short", action="store_true", help="also pool short-separation channels"
    )
    parser.add_argument(
        "--group-column",
        default="group",
        metavar="NAME",
        help="participants.tsv column with the group label (default: group)",
    )
    parser.add_argument(
        "--groups",
        type=_pair,
        metavar="A,B",
        help="the two groups compared, A - B (default: the two found, sorted)",
    )
    parser.add_argument(
        "--pair",
        type=_pair,
        metavar="A,B",
        help="paired/interaction models: the terms compared, A - B",
    )
    parser.add_argument(
        "--equal-variance",
        action="store_true",
        help="two-group tests: pooled variance / one shared tau² (default Welch)",
    )
    parser.add_argument(
        "--normal-reference",
        action="store_true",
        help="weighted models: normal reference instead of Knapp-Hartung t",
    )
    parser.add_argument(
        "--permutations",
        type=int,
        default=0,
        metavar="N",
        help="one-sample/paired: sign-flip p-values from N sign vectors "
        "(exact when 2^n <= N); 0 = off",
    )
    parser.add_argument(
        "--max-statistic",
        action="store_true",
        help="permutation p-values adjusted by the max-|t| across rows",
    )
    parser.add_argument("--seed", type=int, default=0, help="seed of the permutations (default 0)")
    parser.add_argument(
        "--no-influence", action="store_true", help="skip the leave-one-out influence check"
    )
    parser.add_argument(
        "--mixed-reference",
        choices=("t", "normal"),
        default="t",
        help="mixed models: t on n_subjects - n_fixed df (default) or normal (Wald z)",
    )
    parser.set_defaults(func=_handler)


_KEY_COLUMNS = ("subject", "channel", "term", "estimate_pct", "se_pct", "status")


def _is_result_table(path: Path) -> bool:
    try:
        with open(path, encoding="utf-8") as stream:
            header = stream.readline().rstrip("\r\n").split("\t")
    except (OSError, UnicodeDecodeError):
        return False
    return all(column in header for column in _KEY_COLUMNS)


def find_result_tables(paths: list[str]) -> list[Path]:
    """Subject results files named on the command line, folders expanded (sorted).

    In a folder, every ``*.tsv`` whose header holds the subject results columns counts
    (``fstats fit`` writes ``<stem>_glm.tsv``; ``*_results.tsv`` works too); group tables,
    time courses and other TSVs are skipped by their header.
    """
    found: list[Path] = []
    for text in paths:
        path = Path(text)
        if path.is_dir():
            inside = sorted(p for p in path.rglob("*.tsv") if p.is_file() and _is_result_table(p))
            if not inside:
                raise InputError(
                    path,
                    "folder",
                    "subject results tables (*.tsv with columns "
                    f"{list(_KEY_COLUMNS)}, e.g. '<stem>_glm.tsv')",
                    "none",
                )
            found.extend(inside)
        elif path.is_file():
            found.append(path)
        else:
            raise InputError(
                path, "argument RESULTS", "an existing file or folder", "nothing at this path"
            )
    return list(dict.fromkeys(found))


def read_result_tables(paths: list[Path]) -> pd.DataFrame:
    """Read and concatenate subject results tables ('n/a' and empty cells = missing)."""
    from fstats.group.tables import SUBJECT_COLUMNS

    needed = ("subject", "channel", "term", "estimate", "se", "estimate_pct", "se_pct", "status")
    frames = []
    for path in paths:
        try:
            frame = pd.read_csv(
                path,
                sep="\t",
                na_values=["n/a", ""],
                keep_default_na=False,
                dtype={"subject": str, "session": str, "status": str},
            )
        except (pd.errors.ParserError, UnicodeDecodeError, pd.errors.EmptyDataError) as exc:
            raise InputError(
                path, "file", "a tab-separated subject results table", str(exc).split("\n")[0]
            ) from exc
        missing = [c for c in needed if c not in frame.columns]
        if missing:
            raise InputError(
                path,
                "header",
                f"the subject results columns {list(SUBJECT_COLUMNS)}",
                f"no column(s) {missing}",
            )
        frames.append(frame)
    return pd.concat(frames, ignore_index=True)


def _sha256(path: Path) -> str:
    digest = hashlib.sha256()
    with open(path, "rb") as stream:
        for block in iter(lambda: stream.read(1 << 20), b""):
            digest.update(block)
    return digest.hexdigest()


def _handler(args: argparse.Namespace) -> int:
    from fstats.group import GroupModel, write_group_results
    from fstats.inputs import read_participants

    paths = find_result_tables(args.results)
    tables = read_result_tables(paths)
    participants = None
    if args.participants is not None:
        if not args.participants.is_file():
            raise InputError(
                args.participants, "--participants", "an existing file", "nothing at this path"
            )
        participants = read_participants(args.participants)
    model = GroupModel(
        kind=args.model,
        formula=args.formula,
        weighting=args.weighting,
        correction=args.correction,
        alpha=args.alpha,
        units=args.units,
        terms=args.terms,
        channels=args.channels,
        include_short=args.include_short,
        group_column=args.group_column,
        groups=args.groups,
        pair=args.pair,
        equal_variance=args.equal_variance,
        knapp_hartung=not args.normal_reference,
        n_permutations=args.permutations,
        max_statistic=args.max_statistic,
        seed=args.seed,
        influence=not args.no_influence,
        mixed_reference=args.mixed_reference,
    )
    result = model.fit(tables, participants)
    inputs = {str(p): _sha256(p) for p in paths}
    if args.participants is not None:
        inputs[str(args.participants)] = _sha256(args.participants)
    tsv, sidecar = write_group_results(result, args.out, provenance={"inputs": inputs})
    table = result.table()
    shown = table[
        [
            "channel",
            "term",
            "comparison",
            "estimate",
            "se",
            "p",
            "p_adjusted",
            "n_subjects",
            "status",
        ]
    ]
    print(
        f"{model.describe()}; {len(paths)} result table(s), "
        f"{result.info['n_subjects_used']} subject(s) used, "
        f"{len(result.exclusions)} exclusion(s)"
    )
    print(shown.to_string(index=False, float_format=lambda v: f"{v:.4g}"))
    print(f"wrote {tsv} and {sidecar}", file=sys.stderr)
    return 0
