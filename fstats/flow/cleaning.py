"""Quality control of a recording's flow series: gaps, motion, relative flow, filtering.

:func:`clean_flow` runs the steps in a fixed order and records each one, with its
settings and what it changed, in ``Recording.provenance["flow"]``.  Masks of
shape (n_times, n_channels) go to ``provenance["flow"]["masks"]``; the union that
the GLM should down-weight or exclude is ``masks["exclude"]``.
"""

from __future__ import annotations

import dataclasses
import logging
import warnings

import numpy as np

from fstats.errors import QualityWarning
from fstats.flow.motion import MOTION_METHODS, correct_motion, detect_motion, mask_segments
from fstats.flow.series import fill_short_gaps, lowpass, relative_flow_values, resample
from fstats.inputs.recording import Recording

__all__ = ["MOTION_CHOICES", "clean_flow", "relative_flow"]

logger = logging.getLogger(__name__)

#: Motion handling choices: "none" skips detection; the others detect, then correct.
MOTION_CHOICES: tuple[str, ...] = ("none", *MOTION_METHODS)


def _flow_provenance(recording: Recording) -> dict:
    flow = dict(recording.provenance.get("flow", {}))
    flow["masks"] = dict(flow.get("masks", {}))
    flow["steps"] = list(flow.get("steps", []))
    return flow


def relative_flow(
    recording: Recording, baseline_window_s: tuple[float, float], *, exclude=None
) -> Recording:
    """The recording with flow relative to its mean over a baseline window (rBF).

    Parameters
    ----------
    recording : Recording
        Flow in cm²/s.
    baseline_window_s : (float, float)
        Baseline start and stop in s.
    exclude : ndarray of bool, shape (n_times, n_channels), optional
        Samples left out of the baseline mean; default ``provenance["flow"]["masks"]["exclude"]``
        when present.

    Returns
    -------
    Recording
        ``flow_unit == "relative"``; the baseline per channel (cm²/s) is in
        ``provenance["flow"]["relative"]``.
    """
    if recording.flow_unit == "relative":
        raise ValueError("flow is already relative")
    prov = _flow_provenance(recording)
    if exclude is None:
        exclude = prov["masks"].get("exclude")
    rel, baseline = relative_flow_values(
        recording.flow, recording.times_s, baseline_window_s, exclude=exclude
    )
    empty = [n for n, b in zip(recording.channel_names, baseline, strict=True) if not b > 0]
    if empty:
        warnings.warn(
            f"{recording.source}: no usable baseline samples in {baseline_window_s} s for "
            f"channel(s) {empty}; their relative flow is NaN",
            QualityWarning,
            stacklevel=2,
        )
    prov["relative"] = {
        "baseline_window_s": [float(v) for v in baseline_window_s],
        "baseline_cm2_s": dict(zip(recording.channel_names, map(float, baseline), strict=True)),
    }
    prov["steps"].append("relative flow")
    return dataclasses.replace(
        recording,
        flow=rel,
        flow_unit="relative",
        provenance={**recording.provenance, "flow": prov},
    )


def clean_flow(
    recording: Recording,
    *,
    max_gap_s: float = 0.5,
    motion: str = "mark",
    motion_threshold: float = 6.0,
    motion_window_s: float = 30.0,
    baseline_window_s: tuple[float, float] | None = None,
    lowpass_hz: float | None = None,
    lowpass_order: int = 4,
    resample_hz: float | None = None,
) -> Recording:
    """Quality control of a flow series, every step recorded in the provenance.

    Steps, in order: fill short gaps; detect motion and correct or mark it; relative
    flow against a baseline window; zero-phase low-pass; resampling.

    Parameters
    ----------
    recording : Recording
        Flow in cm²/s (or relative); existing masks in ``provenance["flow"]["masks"]``
        (e.g. from :func:`fstats.flow.flow_from_g2`) are carried along.
    max_gap_s : float, default=0.5
        Missing runs up to this long (s) are interpolated and marked in
        ``masks["filled"]``; longer runs stay NaN.
    motion : {"none", "mark", "baseline", "spline"}, default="mark"
        Motion handling (see :mod:`fstats.flow.motion`).  Detected segments are
        always in ``masks["motion"]``.
    motion_threshold : float, default=6.0
        Jump threshold in robust standard deviations of the first differences.
    motion_window_s : float, default=30.0
        Window of the running robust scale, s.
    baseline_window_s : (float, float), optional
        If given, the output is relative flow (baseline mean = 1) over this window.
    lowpass_hz : float, optional
        If given, zero-phase Butterworth low-pass at this cutoff (Hz).  Keep it above
        ~3.5 Hz when cardiac regressors (two harmonics) are wanted downstream.
    lowpass_order : int, default=4
    resample_hz : float, optional
        If given, resample to this rate (Hz); masks follow by nearest sample, and g2
        curves and count rates, on the old time base, are dropped.

    Returns
    -------
    Recording
        A new recording; the input is unchanged.
    """
    if motion not in MOTION_CHOICES:
        raise ValueError(f"motion must be one of {MOTION_CHOICES}, got {motion!r}")
    prov = _flow_provenance(recording)
    masks = prov["masks"]
    names = recording.channel_names
    sfreq = recording.sfreq_hz
    times = recording.times_s

    flow, filled = fill_short_gaps(recording.flow, sfreq, max_gap_s=max_gap_s)
    masks["filled"] = filled | masks.get("filled", np.zeros_like(filled))
    prov["gaps"] = {
        "max_gap_s": max_gap_s,
        "filled_samples": dict(zip(names, map(int, filled.sum(axis=0)), strict=True)),
        "missing_samples": dict(
            zip(names, map(int, (~np.isfinite(flow)).sum(axis=0)), strict=True)
        ),
    }
    prov["steps"].append("fill short gaps")

    if motion != "none":
        moving = detect_motion(flow, sfreq, threshold=motion_threshold, window_s=motion_window_s)
        flow = correct_motion(flow, moving, sfreq, method=motion)
        masks["motion"] = moving
        prov["motion"] = {
            "method": motion,
            "threshold": motion_threshold,
            "window_s": motion_window_s,
            "segments_s": {n: mask_segments(moving[:, i], times) for i, n in enumerate(names)},
            "fraction": dict(zip(names, map(float, moving.mean(axis=0)), strict=True)),
        }
        prov["steps"].append(f"motion ({motion})")
        heavy = [n for n, f in prov["motion"]["fraction"].items() if f > 0.2]
        if heavy:
            warnings.warn(
                f"{recording.source}: motion marked in more than 20% of channel(s) {heavy}",
                QualityWarning,
                stacklevel=2,
            )

    exclude = np.zeros(flow.shape, dtype=bool)
    for key, mask in masks.items():
        if key not in {"exclude", "filled"}:
            exclude |= mask
    masks["exclude"] = exclude
    out = dataclasses.replace(
        recording, flow=flow, provenance={**recording.provenance, "flow": prov}
    )

    if baseline_window_s is not None:
        out = relative_flow(out, baseline_window_s, exclude=exclude | ~np.isfinite(flow))
        prov = out.provenance["flow"]

    if lowpass_hz is not None:
        flow = lowpass(out.flow, sfreq, lowpass_hz, order=lowpass_order)
        prov["lowpass"] = {
            "cutoff_hz": float(lowpass_hz),
            "order": int(lowpass_order),
            "design": "scipy.signal.butter(output='sos') + sosfiltfilt (zero phase)",
        }
        prov["steps"].append("low-pass")
        out = dataclasses.replace(out, flow=flow, provenance={**out.provenance, "flow": prov})

    if resample_hz is not None:
        new_times, flow = resample(out.times_s, out.flow, resample_hz)
        nearest = np.clip(np.round((new_times - times[0]) * sfreq).astype(int), 0, times.size - 1)
        prov["masks"] = {k: v[nearest] for k, v in prov["masks"].items()}
        for key in ("beta", "count_rate_hz"):
            if key in prov:
                prov[key] = prov[key][nearest]
        prov["resample"] = {
            "from_hz": sfreq,
            "to_hz": float(resample_hz),
            "method": "resample_poly",
        }
        prov["steps"].append("resample")
        out = dataclasses.replace(
            out,
            times_s=new_times,
            flow=flow,
            g2=None,
            lags_s=None,
            count_rate_hz=None,
            provenance={**out.provenance, "flow": prov},
        )
    logger.info("%s: flow cleaned (%s)", recording.source or "recording", ", ".join(prov["steps"]))
    return out
