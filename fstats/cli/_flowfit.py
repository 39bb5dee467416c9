"""``fstats flowfit``: fit BFi to the g2 curves of a SNIRF recording and write the flow."""

from __future__ import annotations

import argparse
import json
import logging
import math
import os
import shutil
import tempfile
from pathlib import Path

import numpy as np

from fstats.errors import InputError

__all__ = ["register"]

logger = logging.getLogger(__name__)

_DESCRIPTION = """\
Fit the blood-flow index BFi (cm²/s) to every g2 curve of a SNIRF recording (dataType
401, lags in probe/correlationTimeDelays) with the semi-infinite correlation diffusion
model (extrapolated-zero boundary, Brownian motion, Siegert relation), all curves at
once, then check the flow series: curves that cannot be fitted (NaN, wrong lag count,
g2 below 1, non-decaying, zero count rate) become missing samples with a reason; short
gaps are interpolated; motion artefacts (sudden jumps against a robust running scale)
are marked or corrected; optionally relative flow, low-pass filtering and resampling.
Nothing about a bad curve stops the recording. The output feeds 'fstats fit' unchanged."""

_EPILOG = """\
outputs:
  OUTPUT ending .tsv/.csv   flow table ('time' s + one BFi column per channel, cm²/s, or
                            relative with --baseline-window) with its _channels/_events/_aux
                            sidecars (by stem)
  OUTPUT ending .snirf      SNIRF with the flow as dataType 410 (and the g2 curves as 401,
                            unless resampled)
  <stem>_flowfit.json       settings, per-channel curve counts and reasons, motion segments
                            (s), baselines, filter and resampling steps
  <stem>_flowmask.tsv       'time' (s) + one 0/1 column per channel: 1 = sample to exclude
                            or down-weight (bad curve, poor fit, low count rate, motion)
All files are written under temporary names and renamed when complete.

defaults (adult head, one homogeneous medium at 785-850 nm): mua 0.1 /cm, musp 10 /cm,
refractive index 1.4, wavelength from the channel or 785 nm, Reff from the exact Fresnel
integral (0.4935 at n = 1.4).

examples:
  fstats flowfit sub-01_task-subtract_dcs.snirf sub-01_task-subtract_flow.tsv
  fstats flowfit in_dcs.snirf out_flow.tsv --beta 0.5 --fit-range 1e-6:1e-3
  fstats flowfit in_dcs.snirf out_dcs.snirf --motion spline --baseline-window 0:20"""


def _positive(unit: str):
    def parse(text: str) -> float:
        try:
            value = float(text)
        except ValueError:
            value = math.nan
        if not (math.isfinite(value) and value > 0):
            raise argparse.ArgumentTypeError(f"expected a number > 0 {unit}, found {text!r}")
        return value

    return parse


def _beta(text: str):
    if text == "fit":
        return "fit"
    try:
        value = float(text)
    except ValueError:
        value = math.nan
    if not (0 < value <= 1.5):
        raise argparse.ArgumentTypeError(f"expected 'fit' or a number in (0, 1.5], found {text!r}")
    return value


def _range(unit: str):
    def parse(text: str) -> tuple[float, float]:
        parts = text.split(":")
        try:
            lo, hi = (float(p) for p in parts)
        except ValueError:
            lo, hi = math.nan, math.nan
        if not (math.isfinite(lo) and math.isfinite(hi) and hi > lo >= 0):
            raise argparse.ArgumentTypeError(
                f"expected LO:HI with 0 <= LO < HI in {unit}, found {text!r}"
            )
        return lo, hi

    return parse


def register(subparsers: argparse._SubParsersAction) -> None:
    """Add the ``flowfit`` subcommand."""
    from fstats.flow import MOTION_CHOICES, OBSERVABLES

    parser = subparsers.add_parser(
        "flowfit",
        help="fit BFi to g2 curves (SNIRF dataType 401) and write a quality-checked flow",
        description=_DESCRIPTION,
        epilog=_EPILOG,
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    parser.add_argument("input", metavar="INPUT", help="SNIRF file with g2 curves (dataType 401)")
    parser.add_argument(
        "output", metavar="OUTPUT", help="flow table (.tsv or .csv) or SNIRF (.snirf) to write"
    )
    fit = parser.add_argument_group("g2 fit")
    fit.add_argument(
        "--beta",
        type=_beta,
        default="fit",
        metavar="fit|B",
        help="fit the coherence factor per curve, or fix it to B (default: fit)",
    )
    fit.add_argument(
        "--fit-range",
        type=_range("s"),
        default=None,
        metavar="LO:HI",
        help="only lags LO <= tau <= HI (s) take part, e.g. 1e-6:1e-3 (default: all lags)",
    )
    fit.add_argument(
        "--decay-floor",
        type=_positive("(fraction of beta)"),
        default=None,
        metavar="F",
        help="fit each curve only until g2 - 1 falls below F * beta, e.g. 0.05 (default: off)",
    )
    fit.add_argument(
        "--weighting",
        choices=("auto", "uniform", "noise-model"),
        default="auto",
        help="lag weights: equal, or 1/sigma from the photon-noise model (needs count rates); "
        "auto = noise-model when count rates are present (default: auto)",
    )
    fit.add_argument(
        "--mua-per-cm", type=_positive("1/cm"), default=0.1, metavar="MUA",
        help="absorption coefficient, 1/cm (default: 0.1)",
    )  # fmt: skip
    fit.add_argument(
        "--musp-per-cm", type=_positive("1/cm"), default=10.0, metavar="MUSP",
        help="reduced scattering coefficient, 1/cm (default: 10)",
    )  # fmt: skip
    fit.add_argument(
        "--refractive-index", type=_positive(""), default=1.4, metavar="N",
        help="tissue refractive index (default: 1.4)",
    )  # fmt: skip
    fit.add_argument(
        "--wavelength-nm", type=_positive("nm"), default=None, metavar="NM",
        help="laser wavelength, nm (default: each channel's, else 785)",
    )  # fmt: skip
    fit.add_argument(
        "--reff", type=float, default=None, metavar="R",
        help="effective reflection coefficient (default: exact Fresnel value for N)",
    )  # fmt: skip
    fit.add_argument(
        "--observable", choices=OBSERVABLES, default="fluence",
        help="detected quantity of the model: fluence or diffuse flux (default: fluence)",
    )  # fmt: skip
    fit.add_argument(
        "--integration-time-s", type=_positive("s"), default=None, metavar="T",
        help="averaging time of one curve, s (default: one sample period)",
    )  # fmt: skip
    fit.add_argument(
        "--min-count-rate-hz", type=_positive("counts/s"), default=2000.0, metavar="R",
        help="mark curves below this photon count rate (default: 2000)",
    )  # fmt: skip
    qc = parser.add_argument_group("flow series")
    qc.add_argument(
        "--max-gap-s", type=_positive("s"), default=0.5, metavar="S",
        help="interpolate missing runs up to S seconds (default: 0.5)",
    )  # fmt: skip
    qc.add_argument(
        "--motion", choices=MOTION_CHOICES, default="mark",
        help="motion artefacts: ignore, mark only, piecewise baseline correction or spline "
        "correction; detected segments are always in the mask (default: mark)",
    )  # fmt: skip
    qc.add_argument(
        "--motion-threshold", type=_positive("robust SDs"), default=6.0, metavar="K",
        help="jump size that marks motion, in robust SDs of the first differences (default: 6)",
    )  # fmt: skip
    qc.add_argument(
        "--baseline-window", type=_range("s"), default=None, metavar="START:STOP",
        help="write relative flow (baseline mean = 1) against this window, s (default: off)",
    )  # fmt: skip
    qc.add_argument(
        "--lowpass-hz", type=_positive("Hz"), default=None, metavar="F",
        help="zero-phase Butterworth low-pass cutoff, Hz; keep above ~3.5 Hz to keep the "
        "cardiac pulse (default: off)",
    )  # fmt: skip
    qc.add_argument(
        "--resample-hz", type=_positive("Hz"), default=None, metavar="F",
        help="resample the flow to F Hz (default: keep the rate)",
    )  # fmt: skip
    parser.set_defaults(func=_handle)


def _stem(path: Path) -> str:
    name = path.name
    for ending in ("_flow.tsv", "_flow.csv", "_dcs.snirf"):
        if name.endswith(ending):
            return name[: -len(ending)]
    return path.stem


def _jsonable(value):
    if isinstance(value, dict):
        return {str(k): _jsonable(v) for k, v in value.items() if not isinstance(v, np.ndarray)}
    if isinstance(value, list | tuple):
        return [_jsonable(v) for v in value]
    if isinstance(value, np.generic):
        return value.item()
    if isinstance(value, float) and not math.isfinite(value):
        return None
    return value


def _handle(args: argparse.Namespace) -> int:
    from fstats.flow import flow_from_g2
    from fstats.inputs import read_snirf, write_flow_table, write_snirf

    source = Path(args.input)
    target = Path(args.output)
    if source.suffix.lower() != ".snirf":
        raise InputError(source, "file name", "a SNIRF file (.snirf) with g2 curves", source.name)
    if target.suffix.lower() not in {".tsv", ".csv", ".snirf"}:
        raise InputError(target, "file name", "an output ending .tsv, .csv or .snirf", target.name)
    if not source.is_file():
        raise InputError(source, "file", "an existing file", "no such file")
    recording = read_snirf(source)
    weighting = args.weighting
    if weighting == "auto":
        weighting = "noise-model" if recording.count_rate_hz is not None else "uniform"
    elif weighting == "noise-model" and recording.count_rate_hz is None:
        raise InputError(
            source,
            "count rates",
            "photon count rates per sample for --weighting noise-model",
            "none in the file",
            hint="use --weighting uniform",
        )
    result = flow_from_g2(
        recording,
        beta=args.beta,
        fit_range_s=args.fit_range,
        decay_floor=args.decay_floor,
        weighting=weighting,
        mua_per_cm=args.mua_per_cm,
        musp_per_cm=args.musp_per_cm,
        n=args.refractive_index,
        wavelength_nm=args.wavelength_nm,
        reff=args.reff,
        observable=args.observable,
        integration_time_s=args.integration_time_s,
        min_count_rate_hz=args.min_count_rate_hz,
        max_gap_s=args.max_gap_s,
        motion=args.motion,
        motion_threshold=args.motion_threshold,
        baseline_window_s=args.baseline_window,
        lowpass_hz=args.lowpass_hz,
        resample_hz=args.resample_hz,
    )
    target.parent.mkdir(parents=True, exist_ok=True)
    stem = _stem(target)
    staging = Path(tempfile.mkdtemp(prefix=".flowfit-", dir=target.parent))
    try:
        staged = staging / target.name
        if target.suffix.lower() == ".snirf":
            write_snirf(result, staged)
        else:
            write_flow_table(result, staged)
        prov = result.provenance["flow"]
        summary = {
            "input": str(source),
            "output": str(target),
            "flow_unit": result.flow_unit,
            **_jsonable(prov),
        }
        (staging / f"{stem}_flowfit.json").write_text(json.dumps(summary, indent=2) + "\n")
        exclude = prov["masks"]["exclude"].astype(int)
        header = "\t".join(["time", *result.channel_names])
        rows = [
            "\t".join([repr(float(t)), *map(str, row)])
            for t, row in zip(result.times_s, exclude, strict=True)
        ]
        (staging / f"{stem}_flowmask.tsv").write_text(header + "\n" + "\n".join(rows) + "\n")
        for item in sorted(staging.iterdir()):
            os.replace(item, target.parent / item.name)
    finally:
        shutil.rmtree(staging, ignore_errors=True)
    for name, counts in prov["curves"].items():
        logger.info(
            "%s: %d of %d curves good%s",
            name,
            counts["good"],
            counts["n_curves"],
            f" ({counts['reasons']})" if counts["reasons"] else "",
        )
    logger.info("wrote %s", target)
    return 0
