"""``fstats simulate``: write a simulated two-group DCS cohort with ground truth."""

from __future__ import annotations

import argparse
import math

from fstats.cli._types import positive_int
from fstats.errors import InputError

__all__ = ["register"]

_DESCRIPTION = """\
Simulate a cohort of DCS recordings in fstats' own demo scenario and write it as a
cohort folder that every other command reads: serial-subtraction mental arithmetic in
blocks (20 s rest, 40 s 'subtract', 25 s 'recover', repeated), or with --design event
brief 1 s 'cue' events at jittered 12-20 s intervals; two groups of adults, 'younger'
and 'older'. Each recording has a scalp channel 'scalp' (1.0 cm, short-separation) and
two brain-sensitive channels 'frontal_a' (3.0 cm, over the activated area) and
'frontal_b' (3.0 cm, control area), BFi in cm²/s near 1e-8, with cardiac pulsation,
respiration, Mayer waves, drift, slow 1/f cerebral fluctuations, task-locked scalp
changes in half of the subjects, photon-noise-like measurement noise and occasional
motion artefacts. The same seed always gives the same files."""

_EPILOG = """\
outputs (in OUT_DIR):
  participants.tsv                         participant_id, group (younger|older), age (years), sex
  ground_truth.json                        scenario, seed, settings and, per subject, the true
                                           effects (percent), heart rate (bpm), respiration (Hz),
                                           brain fraction of the long channels, motion events, ...
  sub-XX/sub-XX_task-subtract_flow.tsv     'time' (s) + scalp, frontal_a, frontal_b (BFi, cm²/s)
  sub-XX/sub-XX_task-subtract_channels.tsv name, separation_cm, role, wavelength_nm, units
  sub-XX/sub-XX_task-subtract_events.tsv   onset, duration (s), trial_type
  sub-XX/sub-XX_task-subtract_aux.tsv      'time' (s) + ppg, resp (a.u.), accel_x/y/z (g)
  or, with --format snirf, sub-XX/sub-XX_task-subtract_dcs.snirf (BFi as dataType 410 and,
  with --with-g2, g2 curves as dataType 401). The event design uses task-cue in the names.

An existing OUT_DIR must be empty or hold an earlier simulated cohort, which is replaced
only once the new one is complete.

examples:
  fstats simulate demo_cohort
  fstats simulate null_cohort --effect-pct 0 --subjects-per-group 12 --seed 7
  fstats simulate g2_cohort --format snirf --with-g2 --duration-s 300"""


def _number(low: float, *, strict: bool, unit: str):
    def parse(text: str) -> float:
        try:
            value = float(text)
        except ValueError:
            value = math.nan
        ok = math.isfinite(value) and (value > low if strict else value >= low)
        if not ok:
            sign = ">" if strict else ">="
            raise argparse.ArgumentTypeError(
                f"expected a number {sign} {low:g} {unit}, found {text!r}"
            )
        return value

    return parse


def _fraction(text: str) -> float:
    try:
        value = float(text)
    except ValueError:
        value = math.nan
    if not 0.0 <= value <= 1.0:
        raise argparse.ArgumentTypeError(f"expected a fraction between 0 and 1, found {text!r}")
    return value


def register(subparsers: argparse._SubParsersAction) -> None:
    """Add the ``simulate`` subcommand."""
    parser = subparsers.add_parser(
        "simulate",
        help="write a simulated two-group DCS cohort with ground truth",
        description=_DESCRIPTION,
        epilog=_EPILOG,
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    parser.add_argument("out_dir", metavar="OUT_DIR", help="cohort folder to write")
    parser.add_argument(
        "--subjects-per-group",
        type=positive_int(),
        default=8,
        metavar="N",
        help="subjects in each of the two groups (default: 8)",
    )
    parser.add_argument("--seed", type=int, default=0, metavar="S", help="random seed (default: 0)")
    parser.add_argument(
        "--format",
        choices=("tsv", "snirf"),
        default="tsv",
        dest="fmt",
        help="flow tables with sidecars, or one SNIRF file per recording (default: tsv)",
    )
    parser.add_argument(
        "--design",
        choices=("block", "event"),
        default="block",
        help="block design (task-subtract) or event design (task-cue) (default: block)",
    )
    parser.add_argument(
        "--effect-pct",
        type=float,
        default=15.0,
        metavar="X",
        help="mean cerebral flow increase of the younger group under frontal_a, percent of "
        "brain baseline flow at the plateau of a long block (for --design event: per unit of "
        "the 1 s boxcar regressor; a single cue peaks at ~0.16 of it); 0 simulates no "
        "activation (default: 15)",
    )
    parser.add_argument(
        "--group-effect-pct",
        type=float,
        default=-5.0,
        metavar="X",
        help="older minus younger mean effect, percentage points (default: -5)",
    )
    parser.add_argument(
        "--effect-sd-pct",
        type=_number(0.0, strict=False, unit="percentage points"),
        default=4.0,
        metavar="X",
        help="between-subject standard deviation of the true effect (default: 4)",
    )
    parser.add_argument(
        "--scalp-task-fraction",
        type=_fraction,
        default=0.5,
        metavar="F",
        help="share of subjects with a task-locked scalp flow and heart-rate change, 0-1 "
        "(default: 0.5)",
    )
    parser.add_argument(
        "--duration-s",
        type=_number(60.0, strict=False, unit="s"),
        default=900.0,
        metavar="D",
        help="length of each recording in seconds (default: 900)",
    )
    parser.add_argument(
        "--sfreq-hz",
        type=_number(6.0, strict=False, unit="Hz"),
        default=20.0,
        metavar="F",
        help="flow sampling rate in Hz, 10-50 is typical (default: 20)",
    )
    parser.add_argument(
        "--with-g2",
        action="store_true",
        help="also simulate raw g2 curves (100 multi-tau lags, 0.1 µs to ~15 ms); needs "
        "--format snirf",
    )
    parser.set_defaults(func=_handle)


def _handle(args: argparse.Namespace) -> int:
    from fstats.simulate import SimulationSettings, simulate_cohort

    if args.with_g2 and args.fmt != "snirf":
        raise InputError(
            "command line",
            "--with-g2",
            "--format snirf with g2 curves",
            f"--format {args.fmt}",
            hint="flow tables cannot hold g2 curves",
        )
    settings = SimulationSettings(
        design=args.design,
        duration_s=args.duration_s,
        sfreq_hz=args.sfreq_hz,
        effect_pct=args.effect_pct,
        scalp_task_fraction=args.scalp_task_fraction,
        with_g2=args.with_g2,
    )
    out = simulate_cohort(
        args.out_dir,
        n_per_group=args.subjects_per_group,
        settings=settings,
        seed=args.seed,
        fmt=args.fmt,
        group_effect_pct=args.group_effect_pct,
        effect_sd_pct=args.effect_sd_pct,
    )
    n = 2 * args.subjects_per_group
    print(f"wrote {n} simulated recordings, participants.tsv and ground_truth.json to {out}")
    return 0
