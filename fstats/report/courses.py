"""Response time courses: per subject from a fit, and averaged across a cohort.

:func:`subject_time_courses` turns one subject fit's block averages (or, when a fit
has none, epoch averages of the recording's flow) into a tidy table;
:func:`average_time_courses` averages such tables across subjects (per group) with
a t-based confidence band, for the cohort page's ``group_time_courses``.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
from scipy import stats

from fstats.report import _access
from fstats.report.plotdata import epoch_average

__all__ = ["response_curves", "subject_time_courses", "average_time_courses"]


def response_curves(fit, recording=None) -> tuple[list[dict], str]:
    """Block-average curves of a subject fit, with epoch averages as fallback.

    Parameters
    ----------
    fit : SubjectFit
        Its ``block_averages`` are used when present.
    recording : Recording, optional
        Needed for the fallback: epoch averages of each channel's flow around the
        onsets of each condition (window -5 s to duration + 20 s, baseline the 5 s
        before onset, values in % change).

    Returns
    -------
    curves : list of dict
        ``condition, channel, method, time_s, mean, ci_low, ci_high, is_short``.
    note : str
        One sentence saying where the curves came from.
    """
    curves = _access.block_average_curves(_access.field_of(fit, "block_averages"))
    note = "Block averages from the fit, with their confidence bands."
    if not curves and recording is not None and recording.events is not None:
        note = (
            "Epoch averages of the measured flow (percent change from the 5 s before each "
            "onset), with 95 % t-based bands across epochs; the fit gave no block averages."
        )
        events = recording.events
        for condition in events.condition_names:
            sel = events.select(condition)
            window = (-5.0, float(np.max(sel.durations_s)) + 20.0)
            for name in recording.channel_names:
                avg = epoch_average(
                    recording.times_s, recording.channel_flow(name), sel.onsets_s, window_s=window
                )
                if avg["n_epochs"]:
                    curves.append(
                        {"condition": condition, "channel": name, "method": "epoch", **avg}
                    )
    short = {c.name: bool(c.is_short) for c in recording.channels} if recording is not None else {}
    for curve in curves:
        curve["is_short"] = short.get(curve["channel"], bool(curve.get("is_short", False)))
    return curves, note


def subject_time_courses(fit, recording=None, *, participant_id: str | None = None) -> pd.DataFrame:
    """One subject's response time courses as a tidy table.

    Parameters
    ----------
    fit : SubjectFit
    recording : Recording, optional
        For the epoch-average fallback (see :func:`response_curves`).
    participant_id : str, optional
        Default: ``fit.subject``.

    Returns
    -------
    DataFrame
        ``participant_id, condition, channel, is_short, method, time_s, value``
        (value in the unit of the block averages, % change for the fallback).
    """
    pid = participant_id or _access.field_of(fit, "subject", default="")
    curves, _ = response_curves(fit, recording)
    frames = [
        pd.DataFrame(
            {
                "participant_id": str(pid),
                "condition": c["condition"],
                "channel": c["channel"],
                "is_short": c["is_short"],
                "method": c["method"],
                "time_s": np.asarray(c["time_s"], dtype=float),
                "value": np.asarray(c["mean"], dtype=float),
            }
        )
        for c in curves
    ]
    columns = ["participant_id", "condition", "channel", "is_short", "method", "time_s", "value"]
    return pd.concat(frames, ignore_index=True) if frames else pd.DataFrame(columns=columns)


def average_time_courses(
    courses: pd.DataFrame,
    participants: pd.DataFrame | None = None,
    *,
    group_column: str = "group",
    confidence: float = 0.95,
) -> pd.DataFrame:
    """Average subject time courses across subjects, per group, with a t-based band.

    Parameters
    ----------
    courses : DataFrame
        Concatenated :func:`subject_time_courses` tables.
    participants : DataFrame, optional
        participants.tsv (``participant_id`` and ``group_column``); without it every
        subject is in group ``"all"``.
    group_column : str, default="group"
    confidence : float, default=0.95

    Returns
    -------
    DataFrame
        ``group, condition, channel, is_short, method, time_s, mean, ci_low, ci_high,
        n_subjects``; the band is ``mean ± t_{n-1} sd / sqrt(n)`` over subjects
        (NaN with fewer than two subjects).  Times are matched after rounding to 1 ms.
    """
    frame = courses.copy()
    if participants is not None and group_column in participants.columns:
        groups = dict(
            zip(
                participants["participant_id"].astype(str),
                participants[group_column].astype(str),
                strict=True,
            )
        )
        frame["group"] = frame["participant_id"].astype(str).map(groups).fillna("n/a")
    else:
        frame["group"] = "all"
    frame["time_s"] = frame["time_s"].round(3)
    keys = ["group", "condition", "channel", "is_short", "method", "time_s"]
    agg = (
        frame.groupby(keys, sort=False)["value"]
        .agg(mean="mean", sd=lambda v: v.std(ddof=1), n_subjects="count")
        .reset_index()
    )
    n = agg["n_subjects"].to_numpy(float)
    with np.errstate(invalid="ignore", divide="ignore"):
        q = np.where(n > 1, stats.t.ppf(0.5 + confidence / 2, np.maximum(n - 1, 1)), np.nan)
        half = q * agg["sd"].to_numpy(float) / np.sqrt(n)
    agg["ci_low"] = agg["mean"] - half
    agg["ci_high"] = agg["mean"] + half
    return agg.drop(columns="sd")[keys[:5] + ["time_s", "mean", "ci_low", "ci_high", "n_subjects"]]
