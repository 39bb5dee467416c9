"""Figures of the cohort page: forest plots, group effects, group-averaged time courses.

Every function takes plain DataFrames and returns a :class:`matplotlib.figure.Figure`
with an Agg canvas.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np
import pandas as pd

from fstats.report.style import new_figure, plain_label, series_style

__all__ = ["forest_figure", "effects_figure", "courses_figure", "MAX_FOREST_PANELS"]

#: Forest plot panels drawn at most (channel × term pairs); the rest are in the tables.
MAX_FOREST_PANELS = 6

_Z95 = 1.959963984540054  # standard normal 97.5 % quantile


def _group_styles(groups: Sequence[str]) -> dict:
    return {g: series_style(i) for i, g in enumerate(dict.fromkeys(groups))}


def forest_figure(
    estimates: pd.DataFrame,
    panels: Sequence[tuple[str, str]],
    *,
    pooled: pd.DataFrame | None = None,
    unit_label: str = "flow change (%)",
):
    """Per-subject estimates with 95 % intervals, one panel per (channel, term).

    Parameters
    ----------
    estimates : DataFrame
        Columns ``channel, term, participant_id, estimate, se`` and optionally ``group``.
        Intervals are ``estimate ± 1.96 se``.
    panels : sequence of (channel, term)
        Which panels to draw, in order (at most six are drawn).
    pooled : DataFrame, optional
        Group rows (``channel, term, estimate, ci_low, ci_high``) drawn as a diamond
        below the subjects.
    unit_label : str
        x-axis label with unit.
    """
    panels = list(panels)[:MAX_FOREST_PANELS]
    ncols = min(3, max(1, len(panels)))
    nrows = -(-max(1, len(panels)) // ncols)
    if "group" not in estimates.columns:
        estimates = estimates.assign(group="all")
    estimates = estimates.assign(group=estimates["group"].fillna("n/a").astype(str))
    order = (
        estimates[["participant_id", "group"]]
        .drop_duplicates("participant_id")
        .sort_values(["group", "participant_id"])
    )
    ids = list(order["participant_id"].astype(str))
    ypos = {pid: len(ids) - i for i, pid in enumerate(ids)}
    styles = _group_styles(order["group"])
    height = 1.2 + nrows * (0.9 + min(0.2, 5.0 / max(len(ids), 1)) * len(ids))
    fig, axes = new_figure(
        3.2 * ncols + 1.2, height, nrows=nrows, ncols=ncols, sharey=True, squeeze=False
    )
    for k, ax in enumerate(axes.ravel()):
        if k >= len(panels):
            ax.set_visible(False)
            continue
        channel, term = panels[k]
        part = estimates[(estimates["channel"] == channel) & (estimates["term"] == term)]
        for group, rows in part.groupby("group", sort=False):
            style = styles[group]
            y = np.array([ypos[str(p)] for p in rows["participant_id"]])
            est = rows["estimate"].to_numpy(float)
            half = _Z95 * rows["se"].to_numpy(float)
            ax.errorbar(
                est,
                y,
                xerr=half,
                fmt=style.marker,
                color=style.color,
                markersize=4,
                elinewidth=1.0,
                capsize=2,
                label=plain_label(group),
            )
        if pooled is not None:
            hit = pooled[(pooled["channel"] == channel) & (pooled["term"] == term)]
            if len(hit):
                row = hit.iloc[0]
                lo, hi, mid = float(row["ci_low"]), float(row["ci_high"]), float(row["estimate"])
                ax.fill(
                    [lo, mid, hi, mid],
                    [0, 0.35, 0, -0.35],
                    color="#222222",
                    zorder=3,
                    label="group mean",
                )
        ax.axvline(0.0, color="#555555", linewidth=0.8, linestyle=":")
        ax.set_title(f"{plain_label(channel)} · {plain_label(term)}", fontsize=9)
        ax.set_xlabel(unit_label)
        ax.set_yticks([ypos[p] for p in ids] + [0])
        ax.set_yticklabels([plain_label(p) for p in ids] + ["group"], fontsize=7)
        ax.set_ylim(-0.8, len(ids) + 0.8)
    handles, labels = axes.ravel()[0].get_legend_handles_labels()
    if handles:
        fig.legend(
            handles,
            labels,
            loc="outside lower center",
            ncols=min(6, len(labels)),
            fontsize=8,
            frameon=False,
        )
    return fig


def effects_figure(effects: pd.DataFrame, *, unit_label: str = "flow change (%)"):
    """Group estimates with confidence intervals, one row per channel × term × comparison.

    Parameters
    ----------
    effects : DataFrame
        Columns ``channel, term, estimate, ci_low, ci_high`` and optionally
        ``comparison`` and ``p_adjusted`` (rows with ``p_adjusted < 0.05`` get filled
        markers, others open ones).
    unit_label : str
    """
    effects = effects.reset_index(drop=True)
    n = len(effects)
    fig, ax = new_figure(8.0, 1.0 + 0.32 * max(n, 1))
    labels = []
    channels = list(dict.fromkeys(effects["channel"].astype(str)))
    for i, row in effects.iterrows():
        y = n - i
        style = series_style(channels.index(str(row["channel"])))
        significant = (
            "p_adjusted" in row and np.isfinite(row["p_adjusted"]) and row["p_adjusted"] < 0.05
        )
        ax.plot(
            [row["ci_low"], row["ci_high"]],
            [y, y],
            color=style.color,
            linestyle=style.linestyle,
            linewidth=1.6,
        )
        ax.plot(
            row["estimate"],
            y,
            marker=style.marker,
            color=style.color,
            markersize=6,
            markerfacecolor=style.color if significant else "white",
            linestyle="none",
        )
        comparison = str(row.get("comparison", "") or "")
        labels.append(
            " · ".join(plain_label(x) for x in (row["channel"], row["term"], comparison) if str(x))
        )
    ax.set_yticks(np.arange(n, 0, -1))
    ax.set_yticklabels(labels, fontsize=7)
    ax.axvline(0.0, color="#555555", linewidth=0.8, linestyle=":")
    ax.set_xlabel(unit_label)
    ax.set_title("filled marker: adjusted p < 0.05; open: not", fontsize=8, loc="left")
    return fig


def courses_figure(courses: pd.DataFrame, *, unit_label: str = "flow change (%)"):
    """Group-averaged response time courses: rows = conditions, columns = channels.

    Parameters
    ----------
    courses : DataFrame
        Columns ``condition, channel, time_s, mean, ci_low, ci_high`` and optionally
        ``group`` (one line per group), ``is_short`` and ``method`` (with several
        methods only the model-based one, else the first, is drawn).
    unit_label : str
    """
    if "method" in courses.columns and courses["method"].nunique() > 1:
        # One source per figure: the model-based average when present.
        methods = list(dict.fromkeys(courses["method"].astype(str)))
        keep = next((m for m in ("model", "fir") if m in methods), methods[0])
        courses = courses[courses["method"].astype(str) == keep]
    if "group" not in courses.columns:
        courses = courses.assign(group="all")
    courses = courses.assign(group=courses["group"].fillna("all").astype(str))
    conditions = list(dict.fromkeys(courses["condition"].astype(str)))
    channels = list(dict.fromkeys(courses["channel"].astype(str)))
    styles = _group_styles(courses["group"])
    fig, axes = new_figure(
        2.9 * len(channels) + 0.8,
        0.6 + 2.3 * len(conditions),
        nrows=len(conditions),
        ncols=len(channels),
        sharex=True,
        sharey="row",
        squeeze=False,
    )
    for r, condition in enumerate(conditions):
        for c, channel in enumerate(channels):
            ax = axes[r, c]
            part = courses[
                (courses["condition"].astype(str) == condition)
                & (courses["channel"].astype(str) == channel)
            ]
            for group, rows in part.groupby("group", sort=False):
                rows = rows.sort_values("time_s")
                style = styles[group]
                t = rows["time_s"].to_numpy(float)
                ax.fill_between(
                    t,
                    rows["ci_low"].to_numpy(float),
                    rows["ci_high"].to_numpy(float),
                    color=style.color,
                    alpha=0.2,
                    linewidth=0,
                )
                ax.plot(
                    t,
                    rows["mean"].to_numpy(float),
                    label=plain_label(group),
                    linewidth=1.3,
                    **style.line_kwargs(),
                )
            ax.axhline(0.0, color="#555555", linewidth=0.7)
            ax.axvline(0.0, color="#555555", linewidth=0.7, linestyle=":")
            ax.set_title(f"{plain_label(condition)} · {plain_label(channel)}", fontsize=9)
            if c == 0:
                ax.set_ylabel(unit_label)
            if r == len(conditions) - 1:
                ax.set_xlabel("time from onset (s)")
    handles, labels = axes[0, 0].get_legend_handles_labels()
    if handles:
        fig.legend(
            handles,
            labels,
            loc="outside lower center",
            ncols=min(6, len(labels)),
            fontsize=8,
            frameon=False,
        )
    return fig
