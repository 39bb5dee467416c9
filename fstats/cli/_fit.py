"""``fstats fit``: fit one recording with a design; write the results table, sidecar and report."""

from __future__ import annotations

import argparse
import logging
from pathlib import Path

from fstats.errors import InputError, suggest

__all__ = ["register"]

logger = logging.getLogger(__name__)

_DESCRIPTION = """\
Fit a design (YAML) to every channel of one DCS recording and write the subject results:
estimates in the flow's unit (BFi, cm²/s per unit regressor) and in percent change of flow,
standard errors, t or F statistics, effective degrees of freedom, p-values and confidence
intervals, for every regressor and every contrast of the design. The default method,
ar-irls, prewhitens each channel with an AR(p) noise model (order chosen by BIC) and fits
it by robust iteratively reweighted least squares (Tukey bisquare), so motion spikes are
down-weighted; standard errors come from a frequency-domain sandwich that stays valid when
slow 1/f fluctuations survive the whitening."""

_EPILOG = """\
inputs:
  RECORDING   <stem>_flow.tsv | <stem>_flow.csv | <stem>_dcs.snirf (sidecars found by stem)
  DESIGN      YAML design file (schema: designs/README.md); its fit_options (method,
              max_ar_order, ...) apply unless overridden here

outputs (in DIR, written atomically):
  <stem>_glm.tsv          tidy results, one row per channel x regressor or contrast
  <stem>_glm.json         design, fit options, package versions, input sha256, diagnostics
  <stem>_timecourses.tsv  block-averaged responses (model FIR and epochs), percent change
  report.html             with --report, if the report stage is installed

percent change is relative to the channel's baseline flow: the mean over the fitted samples
of the model's prediction with every task regressor set to zero.

exit status: 0 every channel fitted; 1 some channels failed (their rows carry the reason in
the status column); 2 bad input."""

_METHODS = ("ols", "ar", "ar-irls")


def register(subparsers: argparse._SubParsersAction) -> None:
    """Add the ``fit`` subcommand."""
    parser = subparsers.add_parser(
        "fit",
        help="fit a design to one recording; write results table, sidecar (and report)",
        description=_DESCRIPTION,
        epilog=_EPILOG,
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    parser.add_argument("recording", metavar="RECORDING", help="recording (flow table or SNIRF)")
    parser.add_argument("--design", required=True, metavar="DESIGN", help="YAML design file")
    parser.add_argument("--out", required=True, metavar="DIR", help="output folder")
    parser.add_argument(
        "--method",
        choices=_METHODS,
        default=None,
        help="ols (reference only), ar (AR prewhitening) or ar-irls (default: the design's "
        "fit_options.method, else ar-irls)",
    )
    parser.add_argument(
        "--max-ar-order",
        type=int,
        default=None,
        metavar="N",
        help="largest AR order tried by the BIC search, in samples (default: the design's "
        "fit_options.max_ar_order, else 4 s of samples, 80 at 20 Hz)",
    )
    parser.add_argument(
        "--channels",
        nargs="+",
        default=None,
        metavar="NAME",
        help="channels to fit (default: all)",
    )
    parser.add_argument(
        "--report", action="store_true", help="also write an HTML subject report (report.html)"
    )
    parser.set_defaults(func=_run)


def _glm_from_options(options: dict, design_path: str):
    import dataclasses

    from fstats.fit import SubjectGLM

    known = {f.name for f in dataclasses.fields(SubjectGLM)}
    for name in options:
        if name not in known:
            raise InputError(
                design_path,
                f"fit_options.{name}",
                f"one of {', '.join(sorted(known))}",
                name,
                hint=suggest(name, known),
            )
    return SubjectGLM(**options)


def _run(args: argparse.Namespace) -> int:
    from fstats.design import build_design, load_design
    from fstats.fit import ChannelFailure, write_subject_results
    from fstats.inputs import read_recording

    recording_path = Path(args.recording)
    if not recording_path.is_file():
        raise InputError(args.recording, "RECORDING", "an existing file", args.recording)
    if args.max_ar_order is not None and args.max_ar_order < 0:
        raise InputError("--max-ar-order", "value", "a whole number >= 0", args.max_ar_order)
    recording = read_recording(recording_path)
    spec = load_design(args.design)
    design = build_design(spec, recording)
    options = dict(getattr(spec, "fit_options", {}) or {})
    if args.method is not None:
        options["method"] = args.method
    if args.max_ar_order is not None:
        options["max_ar_order"] = args.max_ar_order
    glm = _glm_from_options(options, args.design)
    fit = glm.fit(recording, design, channels=args.channels)
    stem = recording_path.name
    for suffix in ("_flow.tsv", "_flow.csv", "_dcs.snirf"):
        if stem.endswith(suffix):
            stem = stem[: -len(suffix)]
            break
    else:
        stem = recording_path.stem
    inputs = [str(recording_path), str(args.design)]
    provenance = {"inputs": inputs, "command": "fstats fit"}
    if hasattr(spec, "model_dump"):
        provenance["design"] = spec.model_dump(mode="json")
    tsv, sidecar = write_subject_results(fit, args.out, stem, provenance=provenance)
    logger.info("wrote %s and %s", tsv, sidecar)
    if args.report:
        try:
            from fstats.report import subject_report
        except ImportError:
            logger.info("report stage not available; no report written")
        else:
            page = subject_report(
                recording, design, fit, Path(args.out) / "report.html", provenance=provenance
            )
            logger.info("wrote %s", page)
    failed = [c for c in fit.channel_fits.values() if isinstance(c, ChannelFailure)]
    for failure in failed:
        logger.warning("channel %s not fitted: %s", failure.channel, failure.reason)
    return 1 if failed else 0
