"""``fstats inspect``: read and check a recording or a cohort folder, print a summary."""

from __future__ import annotations

import argparse
import sys
import warnings
from pathlib import Path

import numpy as np

from fstats.errors import InputError, InputRepairWarning
from fstats.inputs import (
    FLOW_UNITS,
    SHORT_SEPARATION_THRESHOLD_CM,
    Recording,
    read_cohort,
    read_recording,
)

__all__ = ["register", "summarize_recording"]

_DESCRIPTION = """\
Read a recording (or every recording of a cohort folder), check it as the analysis would,
and print a short summary: duration (s), sampling rate (Hz), channels with their
source-detector separations (cm) and roles (short = scalp, long = brain-sensitive), flow
unit, g2 lags, task events per condition, auxiliary signals, and the repairs made on the
way in (dropped duplicate rows, jitter snapped onto a regular grid, short gaps
interpolated) or gaps kept as missing. Nothing is written."""

_EPILOG = f"""\
inputs:
  <stem>_flow.tsv | <stem>_flow.csv   'time' (s) + one column per channel (BFi, cm²/s, or
                                      relative flow when channels.tsv says units=relative)
  <stem>_channels.tsv                 name, separation_cm [, role short|long, wavelength_nm,
                                      units cm2/s|relative]  (required beside a flow table)
  <stem>_events.tsv                   BIDS events: onset, duration (s), trial_type [, amplitude]
  <stem>_aux.tsv                      'time' (s) + auxiliary signals (ppg, resp, accel_x, ...)
  <stem>_dcs.snirf                    SNIRF/HDF5 with DCS dataType 410 (BFi) and/or 401 (g2)
  a cohort folder                     participants.tsv + sub-<label>/ folders of the above

channels without a role are short when separation_cm <= the threshold
(default {SHORT_SEPARATION_THRESHOLD_CM} cm).

exit status: 0 everything read; 2 a file was refused (one line per refused file on
stderr naming the file, the line/column or field, what was expected and what was found)."""


def _positive_cm(text: str) -> float:
    try:
        value = float(text)
    except ValueError:
        value = float("nan")
    if not (np.isfinite(value) and value > 0):
        raise argparse.ArgumentTypeError(f"expected a separation in cm > 0, found {text!r}")
    return value


def register(subparsers: argparse._SubParsersAction) -> None:
    """Add the ``inspect`` subcommand."""
    parser = subparsers.add_parser(
        "inspect",
        help="read and check a recording or cohort folder; print a summary",
        description=_DESCRIPTION,
        epilog=_EPILOG,
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    parser.add_argument(
        "path",
        metavar="PATH",
        help="a recording (*_flow.tsv, *_flow.csv, *_dcs.snirf) or a cohort folder",
    )
    parser.add_argument(
        "--short-threshold-cm",
        type=_positive_cm,
        default=SHORT_SEPARATION_THRESHOLD_CM,
        metavar="CM",
        help="channels without a role at or below this separation (cm) are short-separation "
        f"channels (default {SHORT_SEPARATION_THRESHOLD_CM})",
    )
    parser.add_argument(
        "--flow-unit",
        choices=FLOW_UNITS,
        default=None,
        help="unit of the flow columns of a flow table, overriding channels.tsv "
        "(default: its 'units' column, else cm2/s)",
    )
    parser.set_defaults(func=_handle)


def _read(path: Path, args: argparse.Namespace) -> Recording:
    options = {"short_threshold_cm": args.short_threshold_cm}
    if args.flow_unit and path.suffix.lower() != ".snirf":
        options["flow_unit"] = args.flow_unit
    with warnings.catch_warnings():  # repairs are logged and listed in the summary
        warnings.simplefilter("ignore", InputRepairWarning)
        return read_recording(path, **options)


def summarize_recording(recording: Recording) -> str:
    """A few lines describing a recording: time base, channels, events, aux, repairs."""
    unit = "cm²/s" if recording.flow_unit == "cm2/s" else "relative"
    lines = [
        f"{recording.source}",
        f"  participant {recording.subject or '-'}, session {recording.session or '-'}",
        f"  {recording.duration_s:.1f} s, {recording.n_times} samples at "
        f"{recording.sfreq_hz:.4g} Hz, flow unit {recording.flow_unit}",
        f"  channels ({len(recording.channels)}):",
    ]
    width = max(len(name) for name in recording.channel_names)
    for i, channel in enumerate(recording.channels):
        column = recording.flow[:, i]
        missing = float(np.isnan(column).mean())
        median = float(np.nanmedian(column)) if missing < 1 else float("nan")
        wavelength = f"{channel.wavelength_nm:g} nm" if channel.wavelength_nm else "- nm"
        lines.append(
            f"    {channel.name:<{width}}  {channel.separation_cm:5.2f} cm  "
            f"{'short' if channel.is_short else 'long ':<5}  {wavelength:>8}  "
            f"median {median:.3g} {unit}, {missing:.1%} missing"
        )
    if recording.provenance.get("flow_missing"):
        lines.append("  flow: not in the file (g2 only; run the flow fit first)")
    if recording.g2 is not None:
        lags = recording.lags_s
        lines.append(f"  g2: {lags.size} lags, {lags.min():.3g}..{lags.max():.3g} s")
    if recording.count_rate_hz is not None:
        rates = ", ".join(
            f"{name} {np.nanmedian(recording.count_rate_hz[:, i]):.3g}"
            for i, name in enumerate(recording.channel_names)
        )
        lines.append(f"  count rate (median, Hz): {rates}")
    events = recording.events
    if events is None or len(events) == 0:
        lines.append("  events: none")
    else:
        lines.append(f"  events ({len(events)}):")
        for condition in events.condition_names:
            chosen = events.select(condition)
            lines.append(
                f"    {condition}: {len(chosen)} (duration {chosen.durations_s.min():.4g}.."
                f"{chosen.durations_s.max():.4g} s, first onset {chosen.onsets_s[0]:.4g} s)"
            )
    if recording.aux:
        parts = []
        for signal in recording.aux.values():
            rate = 1.0 / np.median(np.diff(signal.times_s)) if signal.times_s.size > 1 else 0
            parts.append(f"{signal.name} ({signal.times_s.size} samples, {rate:.4g} Hz)")
        lines.append(f"  aux: {', '.join(parts)}")
    else:
        lines.append("  aux: none")
    repairs = recording.provenance.get("repairs", [])
    lines.append(f"  repairs: {'none' if not repairs else len(repairs)}")
    lines.extend(f"    - {r['message']}" for r in repairs)
    for name, runs in recording.provenance.get("missing_samples", {}).items():
        total = sum(stop - start for start, stop in runs)
        lines.append(f"  kept as missing: {name}: {len(runs)} gap(s), {total:.3g} s in all")
    return "\n".join(lines)


def _handle(args: argparse.Namespace) -> int:
    path = Path(args.path)
    if not path.is_dir():
        print(summarize_recording(_read(path, args)))
        return 0
    cohort = read_cohort(path)
    participants = cohort.participants
    lines = [
        f"cohort {cohort.root}: {len(participants)} participant(s), "
        f"{len(cohort.recordings)} recording(s)"
    ]
    if "group" in participants.columns:
        counts = participants["group"].value_counts(dropna=False)
        lines.append("  groups: " + ", ".join(f"{g} {n}" for g, n in counts.items()))
    others = [c for c in participants.columns if c not in ("participant_id", "group")]
    if others:
        lines.append(f"  covariates: {', '.join(others)}")
    print("\n".join(lines))
    failed = 0
    for entry in cohort.recordings:
        try:
            print(summarize_recording(_read(entry.path, args)))
        except InputError as exc:
            failed += 1
            print(f"fstats inspect: error: {exc}", file=sys.stderr)
    if failed:
        print(f"{failed} of {len(cohort.recordings)} recording(s) refused")
        return 2
    return 0
