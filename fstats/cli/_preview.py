"""``fstats preview``: check a design against a recording without fitting; print a summary."""

from __future__ import annotations

import argparse
import os
import sys
import tempfile
import warnings
from collections import Counter
from pathlib import Path

from fstats.design import build_design, design_table, load_design
from fstats.design.diagnostics import R2_WARN, VIF_WARN
from fstats.errors import DesignWarning, InputError
from fstats.inputs import SHORT_SEPARATION_THRESHOLD_CM, read_events, read_recording

__all__ = ["register", "summarize_design"]

_DESCRIPTION = """\
Build the design matrix a design file implies for one recording, without fitting, and print
a summary: conditions with their number of events and response models, the columns by kind
(task, constant, drift, short, cardiac, aux, motion), the condition number, the variance
inflation factors of the task columns, collinearity warnings, and the heart rate detected
for the cardiac terms. Errors in the design file name the file, the line and the key."""

_EPILOG = f"""\
inputs:
  DESIGN      a YAML design file (schema: designs/README.md)
  RECORDING   <stem>_flow.tsv | <stem>_flow.csv | <stem>_dcs.snirf (sidecars found by stem)

outputs:
  a summary on stdout; with --table, the design matrix as a TSV (time_s + one column per
  regressor, written atomically).

warnings are raised when a task regressor's R² on the drift/nuisance terms exceeds {R2_WARN}
or its variance inflation factor exceeds {VIF_WARN:g}.

exit status: 0 the design fits the recording; 2 the design or the recording was refused."""


def register(subparsers: argparse._SubParsersAction) -> None:
    """Add the ``preview`` subcommand."""
    parser = subparsers.add_parser(
        "preview",
        help="check a design against a recording without fitting; print a summary",
        description=_DESCRIPTION,
        epilog=_EPILOG,
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    parser.add_argument("design", metavar="DESIGN", help="YAML design file")
    parser.add_argument("recording", metavar="RECORDING", help="recording (flow table or SNIRF)")
    parser.add_argument(
        "--events",
        metavar="EVENTS_TSV",
        default=None,
        help="BIDS events.tsv (onset, duration in s, trial_type) replacing the design's timing",
    )
    parser.add_argument(
        "--table",
        metavar="OUT_TSV",
        default=None,
        help="also write the design matrix as a TSV (time_s + regressors)",
    )
    parser.add_argument(
        "--short-threshold-cm",
        type=float,
        default=SHORT_SEPARATION_THRESHOLD_CM,
        metavar="CM",
        help="channels without a role at or below this separation (cm) are short-separation "
        f"channels (default {SHORT_SEPARATION_THRESHOLD_CM})",
    )
    parser.set_defaults(func=_run)


def summarize_design(design, recording, caught: list[str]) -> str:
    """The text summary printed by ``fstats preview``.

    Parameters
    ----------
    design : DesignMatrix
        The built design.
    recording : Recording
        The recording it was built for.
    caught : list of str
        Warning messages raised while building.

    Returns
    -------
    str
        Several lines of plain text.
    """
    info = design.info
    out = [
        f"design     {info['design']['name']}  ({info['design']['source']})",
        f"recording  {recording.source}  {recording.duration_s:.1f} s at "
        f"{recording.sfreq_hz:g} Hz, {recording.n_times} samples",
        "conditions",
    ]
    for cond, cols in design.conditions.items():
        resp = info["responses"][cond]
        params = ", ".join(f"{k}={v:g}" for k, v in resp.items() if isinstance(v, float))
        model = resp["model"] + (f" ({params})" if params else "")
        extra = f" + {', '.join(resp['derivatives'])} derivative" if resp["derivatives"] else ""
        out.append(
            f"  {cond:<20} {info['n_events'][cond]:>4} events  {model}{extra}  "
            f"[{len(cols)} column{'s' if len(cols) != 1 else ''}]"
        )
    counts = Counter(design.kinds)
    out.append("columns    " + ", ".join(f"{k} {n}" for k, n in counts.items()))
    diag = info["diagnostics"]
    out.append(f"condition number  {diag['condition_number']:.3g}")
    task_vif = {n: v for n, v in diag["vif"].items() if n in diag["nuisance_r2"]}
    out.append(
        "task VIF / R² on nuisance  "
        + ", ".join(f"{n} {task_vif[n]:.2f} / {diag['nuisance_r2'][n]:.2f}" for n in task_vif)
    )
    card = info.get("cardiac")
    if card:
        out.append(
            f"heart rate  {card['heart_rate_bpm']:.1f} bpm from {card['source_channel']} "
            f"({card['n_beats']} beats, beat quality {card['beat_quality']:.2f})"
        )
    if design.contrasts:
        out.append(
            "contrasts  "
            + ", ".join(
                f"{c.name} ({c.kind}, {c.weights.shape[0]} row{'s' * (c.weights.shape[0] > 1)})"
                for c in design.contrasts
            )
        )
    fit_opts = info.get("fit_options") or {}
    if fit_opts:
        out.append("fit options  " + ", ".join(f"{k}={v}" for k, v in fit_opts.items()))
    for message in caught:
        out.append(f"warning: {message}")
    if not caught:
        out.append("no design warnings")
    return "\n".join(out)


def _write_atomic(table, path: Path) -> None:
    path.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", dir=path.parent)
    try:
        with os.fdopen(fd, "w", encoding="utf-8", newline="") as handle:
            table.to_csv(handle, sep="\t", index=False, float_format="%.10g")
        os.replace(tmp, path)
    except BaseException:
        Path(tmp).unlink(missing_ok=True)
        raise


def _run(args: argparse.Namespace) -> int:
    spec = load_design(args.design)
    recording = read_recording(args.recording, short_threshold_cm=args.short_threshold_cm)
    events = None
    if args.events:
        if not Path(args.events).exists():
            raise InputError(args.events, "--events", "an existing events.tsv", args.events)
        events = read_events(args.events, recording_duration_s=recording.duration_s)
    with warnings.catch_warnings(record=True) as records:
        warnings.simplefilter("always", DesignWarning)
        design = build_design(spec, recording, events=events)
    caught = [str(r.message) for r in records if issubclass(r.category, DesignWarning)]
    print(summarize_design(design, recording, caught), file=sys.stdout)
    if args.table:
        _write_atomic(design_table(design), Path(args.table))
    return 0
