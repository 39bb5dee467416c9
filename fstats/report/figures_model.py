"""Figures of the model sections: design matrix, model against data, responses, residuals.

Every function takes plain arrays (or lists of plain dicts) and returns a
:class:`matplotlib.figure.Figure` with an Agg canvas.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence

import numpy as np

from fstats.report.figures_quality import shade_task_periods
from fstats.report.plotdata import envelope_decimate, thin_curve, thin_rows
from fstats.report.style import DIVERGING_CMAP, channel_style, new_figure, plain_label

__all__ = ["design_figure", "fitted_figure", "responses_figure", "acf_figure"]

#: Fixed margins (left, right, bottom, top) in inches of the full-width time-series figures.
_MARGINS_IN = (0.85, 0.15, 0.5, 0.35)


def design_figure(
    values: np.ndarray,
    names: Sequence[str],
    kinds: Sequence[str],
    times_s: np.ndarray,
    *,
    max_rows: int = 600,
):
    """The design matrix as a heat map, each column scaled by its 99th-percentile magnitude.

    Parameters
    ----------
    values : ndarray, shape (n_times, n_regressors)
    names : sequence of str, length n_regressors
        Regressor names (x tick labels).
    kinds : sequence of str, length n_regressors
        Regressor kinds, shown as a bracket label over each run of equal kind.
    times_s : ndarray, shape (n_times,)
        Sample times in seconds (y axis).
    max_rows : int
        Rows are block-averaged down to this many before drawing.
    """
    values = np.asarray(values, dtype=float)
    # A robust scale (99th percentile of |value|) so spiky columns (short channel) stay
    # visible; values beyond it are clipped to ±1.
    scale = np.nanpercentile(np.abs(values), 99, axis=0)
    peak = np.nanmax(np.abs(values), axis=0)
    scale = np.where(scale > 0, scale, np.where(peak > 0, peak, 1.0))
    scaled = np.clip(values / scale, -1.0, 1.0)
    thinned, rows = thin_rows(scaled, max_rows)
    n_reg = values.shape[1]
    width = min(14.0, max(5.0, 0.28 * n_reg + 2.5))
    fig, ax = new_figure(width, 5.2)
    ax.grid(False)
    t = np.asarray(times_s, dtype=float)
    image = ax.imshow(
        thinned,
        aspect="auto",
        interpolation="nearest",
        cmap=DIVERGING_CMAP,
        vmin=-1.0,
        vmax=1.0,
        extent=(-0.5, n_reg - 0.5, float(t[-1]), float(t[0])),
    )
    ax.set_xticks(np.arange(n_reg))
    ax.set_xticklabels(
        [plain_label(n) for n in names], rotation=90, fontsize=6 if n_reg > 30 else 7
    )
    ax.set_ylabel("time (s)")
    ax.set_xlabel("regressor")
    # Kind brackets along the top edge.
    start = 0
    for i in range(1, n_reg + 1):
        if i == n_reg or kinds[i] != kinds[start]:
            ax.annotate(
                kinds[start],
                xy=((start + i - 1) / 2, 1),
                xycoords=("data", "axes fraction"),
                xytext=(0, 4),
                textcoords="offset points",
                ha="center",
                va="bottom",
                fontsize=7,
            )
            if i < n_reg:
                ax.axvline(i - 0.5, color="#222222", linewidth=0.8)
            start = i
    fig.colorbar(image, ax=ax, shrink=0.7, label="value / column scale (unitless)")
    return fig


def fitted_figure(
    times_s: np.ndarray,
    measured: Mapping[str, np.ndarray],
    fitted: Mapping[str, np.ndarray],
    spans: Mapping[str, Sequence[tuple[float, float]]],
    *,
    unit_label: str = "BFi (cm²/s)",
    max_points: int = 3000,
):
    """Measured flow and model fit for each fitted channel, task periods shaded.

    Parameters
    ----------
    times_s : ndarray, shape (n_times,)
    measured, fitted : mapping of channel name to ndarray, shape (n_times,)
        Same keys; flow in the unit of ``unit_label``.
    spans : mapping of condition to list of (start_s, stop_s)
    unit_label : str
    max_points : int
    """
    names = list(fitted)
    fig, axes = new_figure(
        9.0,
        1.1 + 1.6 * len(names),
        nrows=len(names),
        sharex=True,
        squeeze=False,
        margins_in=_MARGINS_IN,
        hspace_in=0.3,
    )
    for ax, name in zip(axes[:, 0], names, strict=False):
        shade_task_periods(ax, spans, legend=ax is axes[0, 0])
        t, v = envelope_decimate(times_s, measured[name], max_points)
        ax.plot(t, v, color="#9aa7b5", linewidth=0.5, label=f"{plain_label(name)} measured")
        t, v = envelope_decimate(times_s, fitted[name], max_points)
        ax.plot(t, v, color="#14365d", linewidth=1.1, linestyle="-", label="model fit")
        ax.set_ylabel(unit_label)
        ax.legend(loc="upper right", fontsize=7, ncols=4, frameon=False)
    axes[-1, 0].set_xlabel("time (s)")
    return fig


def responses_figure(
    curves: Sequence[Mapping],
    *,
    durations_s: Mapping[str, float] | None = None,
    unit_label: str = "flow change (%)",
):
    """Block-averaged responses: one row per condition, short channels left, long channels right.

    Parameters
    ----------
    curves : sequence of mappings
        Each with ``condition`` (str), ``channel`` (str), ``is_short`` (bool),
        ``time_s``, ``mean``, ``ci_low``, ``ci_high`` (ndarrays of equal length,
        time relative to onset in s, values in the unit of ``unit_label``).
    durations_s : mapping of condition to float, optional
        Task duration, shaded from 0 s.
    unit_label : str
    """
    conditions = list(dict.fromkeys(c["condition"] for c in curves))
    fig, axes = new_figure(
        9.0,
        0.6 + 2.5 * max(1, len(conditions)),
        nrows=max(1, len(conditions)),
        ncols=2,
        sharex=True,
        sharey="row",
        squeeze=False,
    )
    for row, condition in enumerate(conditions):
        counters = {True: 0, False: 0}
        for curve in (c for c in curves if c["condition"] == condition):
            short = bool(curve["is_short"])
            ax = axes[row, 0 if short else 1]
            style = channel_style(counters[short], short)
            counters[short] += 1
            t = thin_curve(curve["time_s"])
            lo, hi = thin_curve(curve["ci_low"]), thin_curve(curve["ci_high"])
            if np.isfinite(lo).any():
                ax.fill_between(t, lo, hi, color=style.color, alpha=0.22, linewidth=0)
            ax.plot(
                t,
                thin_curve(curve["mean"]),
                linewidth=1.3,
                label=plain_label(curve["channel"]),
                **style.line_kwargs(),
            )
        for col, side in enumerate(("short channels", "long channels")):
            ax = axes[row, col]
            if durations_s and condition in durations_s:
                ax.axvspan(
                    0.0, durations_s[condition], color="#cccccc", alpha=0.35, linewidth=0, zorder=0
                )
            ax.axhline(0.0, color="#555555", linewidth=0.7)
            ax.axvline(0.0, color="#555555", linewidth=0.7, linestyle=":")
            ax.set_title(f"{plain_label(condition)}: {side}")
            if ax.has_data() and ax.get_legend_handles_labels()[0]:
                ax.legend(fontsize=7, frameon=False)
            else:
                ax.text(0.5, 0.5, "no channel", transform=ax.transAxes, ha="center", fontsize=8)
        axes[row, 0].set_ylabel(unit_label)
    for col in range(2):
        axes[-1, col].set_xlabel("time from onset (s)")
    return fig


def acf_figure(
    before: Mapping[str, np.ndarray],
    after: Mapping[str, np.ndarray],
    *,
    sfreq_hz: float,
    n_times: int,
):
    """Residual autocorrelation before and after prewhitening, per channel.

    Parameters
    ----------
    before, after : mapping of channel name to ndarray, shape (n_lags,)
        Autocorrelation at lags 0..n_lags-1 samples (``after`` may miss channels).
    sfreq_hz : float
        Sampling rate in Hz (lags are shown in seconds).
    n_times : int
        Series length, for the approximate white-noise band ``±1.96/sqrt(n_times)``.
    """
    names = list(before)
    fig, axes = new_figure(
        9.0,
        0.8 + 2.1 * len(names),
        nrows=len(names),
        sharex=True,
        squeeze=False,
        margins_in=_MARGINS_IN,
        hspace_in=0.45,
    )
    band = 1.96 / np.sqrt(max(n_times, 1))
    for ax, name in zip(axes[:, 0], names, strict=False):
        for key, series, style, marker in (
            ("before whitening", before.get(name), "-", "o"),
            ("after whitening", after.get(name), "--", "s"),
        ):
            if series is None:
                continue
            series = np.asarray(series, dtype=float)
            lags = np.arange(series.size) / sfreq_hz
            color = "#14365d" if style == "-" else "#e0962a"
            ax.plot(
                lags[1:],
                series[1:],
                color=color,
                linestyle=style,
                marker=marker,
                markersize=2.5,
                linewidth=1.0,
                markevery=max(1, series.size // 15),
                label=key,
            )
        ax.axhspan(-band, band, color="#bbbbbb", alpha=0.4, linewidth=0, label="±1.96/√n")
        ax.axhline(0.0, color="#555555", linewidth=0.6)
        ax.set_ylabel("autocorrelation")
        ax.set_title(plain_label(name), loc="left")
        ax.legend(fontsize=7, frameon=False, ncols=3)
    axes[-1, 0].set_xlabel("lag (s)")
    return fig
