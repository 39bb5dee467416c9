"""Figures of the signal-check section: flow traces, power spectra, robust weights.

Every function takes plain arrays and returns a :class:`matplotlib.figure.Figure`
(Agg canvas, no pyplot state).  Long traces are thinned with
:func:`fstats.report.plotdata.envelope_decimate` before drawing.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence

import numpy as np
from matplotlib.collections import PolyCollection
from matplotlib.ticker import FuncFormatter, NullFormatter

from fstats.report.plotdata import envelope_decimate, thin_curve
from fstats.report.style import channel_style, condition_fill, new_figure, plain_label

__all__ = ["flow_traces_figure", "spectra_figure", "weights_figure", "shade_task_periods"]

_MOTION_COLOR = "#7b2d4f"
#: Fixed margins (left, right, bottom, top) in inches of the full-width time-series figures.
_MARGINS_IN = (0.85, 0.15, 0.5, 0.35)


def shade_task_periods(ax, spans: Mapping[str, Sequence[tuple[float, float]]], *, legend=True):
    """Shade task periods on an axes, one hatch and grey per condition.

    Parameters
    ----------
    ax : matplotlib Axes
    spans : mapping of condition to list of (start_s, stop_s)
    legend : bool, default=True
        Label the first span of each condition so it shows in a legend.
    """
    for i, (condition, periods) in enumerate(spans.items()):
        # One collection per condition (far cheaper than one patch per block).
        verts = [
            [
                (start, 0.0),
                (start, 1.0),
                (max(stop, start + 0.5), 1.0),
                (max(stop, start + 0.5), 0.0),
            ]
            for start, stop in periods
        ]
        shading = PolyCollection(
            verts,
            transform=ax.get_xaxis_transform(),
            zorder=0,
            label=plain_label(condition) if legend else None,
            **condition_fill(i),
        )
        ax.add_collection(shading, autolim=False)


def _channel_styles(names: Sequence[str], is_short: Mapping[str, bool]):
    counts = {True: 0, False: 0}
    styles = {}
    for name in names:
        short = bool(is_short.get(name, False))
        styles[name] = channel_style(counts[short], short)
        counts[short] += 1
    return styles


def flow_traces_figure(
    times_s: np.ndarray,
    flows: Mapping[str, np.ndarray],
    is_short: Mapping[str, bool],
    spans: Mapping[str, Sequence[tuple[float, float]]],
    *,
    unit_label: str = "BFi (cm²/s)",
    motion_spans: Sequence[tuple[float, float]] = (),
    max_points: int = 3000,
):
    """Flow of every channel over the whole recording, task periods shaded.

    Parameters
    ----------
    times_s : ndarray, shape (n_times,)
        Sample times in seconds.
    flows : mapping of channel name to ndarray, shape (n_times,)
        Flow per channel, in the unit given by ``unit_label``.
    is_short : mapping of channel name to bool
        Short-separation channels are drawn dashed.
    spans : mapping of condition to list of (start_s, stop_s)
        Task periods to shade.
    unit_label : str
        y-axis label with unit.
    motion_spans : sequence of (start_s, stop_s)
        Spans flagged as likely motion, marked by a bar above each trace.
    max_points : int
        Samples per trace after min/max thinning.
    """
    names = list(flows)
    styles = _channel_styles(names, is_short)
    fig, axes = new_figure(
        9.0,
        1.2 + 1.35 * len(names),
        nrows=len(names),
        sharex=True,
        squeeze=False,
        margins_in=_MARGINS_IN,
        hspace_in=0.3,
    )
    for ax, name in zip(axes[:, 0], names, strict=False):
        shade_task_periods(ax, spans, legend=ax is axes[0, 0])
        t, v = envelope_decimate(times_s, flows[name], max_points)
        role = "short" if is_short.get(name, False) else "long"
        ax.plot(
            t, v, linewidth=0.6, label=f"{plain_label(name)} ({role})", **styles[name].line_kwargs()
        )
        for start, stop in motion_spans:
            ax.axvspan(start, max(stop, start + 0.5), ymin=0.94, ymax=1.0, color=_MOTION_COLOR)
        ax.set_ylabel(unit_label)
        ax.legend(loc="upper right", fontsize=7, ncols=4, frameon=False)
    axes[-1, 0].set_xlabel("time (s)")
    if motion_spans:
        axes[0, 0].set_title("bars at the top: spans with low robust weight (likely motion)")
    return fig


def spectra_figure(
    spectra: Mapping[str, tuple[np.ndarray, np.ndarray]],
    is_short: Mapping[str, bool],
    *,
    heart_rate_hz: float | None = None,
    resp_rate_hz: float | None = None,
    unit_label: str = "PSD ((cm²/s)²/Hz)",
    max_freq_hz: float | None = None,
):
    """Power spectra per channel on a log scale, cardiac and respiratory peaks marked.

    Parameters
    ----------
    spectra : mapping of channel name to (freqs_hz, psd)
        One-sided spectra (e.g. from :func:`fstats.report.plotdata.flow_spectrum`).
    is_short : mapping of channel name to bool
    heart_rate_hz : float, optional
        Detected heart rate (Hz), drawn with its first harmonic.
    resp_rate_hz : float, optional
        Respiratory peak frequency (Hz).
    unit_label : str
        y-axis label with unit.
    max_freq_hz : float, optional
        Upper frequency shown (default: Nyquist or 5 Hz, whichever is lower).
    """
    names = list(spectra)
    styles = _channel_styles(names, is_short)
    fig, ax = new_figure(9.0, 3.4, margins_in=_MARGINS_IN)
    top = 0.0
    for name in names:
        freqs, psd = spectra[name]
        keep = freqs > 0
        role = "short" if is_short.get(name, False) else "long"
        ax.semilogy(
            freqs[keep],
            psd[keep],
            linewidth=0.9,
            label=f"{plain_label(name)} ({role})",
            **styles[name].line_kwargs(),
        )
        top = max(top, float(freqs[-1]))
    ax.set_xlim(0.0, max_freq_hz or min(top, 5.0))
    # Plain "1e-18" tick labels: cheaper to draw than mathtext powers of ten.
    ax.yaxis.set_major_formatter(FuncFormatter(lambda v, _pos: f"{v:.0e}"))
    ax.yaxis.set_minor_formatter(NullFormatter())
    if heart_rate_hz and np.isfinite(heart_rate_hz):
        ax.axvline(
            heart_rate_hz,
            color="#444444",
            linestyle="--",
            linewidth=1.0,
            label=f"heart rate {60 * heart_rate_hz:.0f} bpm",
        )
        ax.axvline(
            2 * heart_rate_hz,
            color="#444444",
            linestyle=(0, (1, 2)),
            linewidth=1.0,
            label="cardiac harmonic",
        )
    if resp_rate_hz and np.isfinite(resp_rate_hz):
        ax.axvline(
            resp_rate_hz,
            color="#999999",
            linestyle="-.",
            linewidth=1.2,
            label=f"respiration {60 * resp_rate_hz:.0f} /min",
        )
    ax.set_xlabel("frequency (Hz)")
    ax.set_ylabel(unit_label)
    ax.legend(fontsize=7, frameon=False, ncols=2)
    return fig


def weights_figure(
    times_s: np.ndarray,
    weights: Mapping[str, np.ndarray],
    *,
    threshold: float = 0.5,
    motion_spans: Sequence[tuple[float, float]] = (),
    max_points: int = 3000,
    bin_s: float = 1.0,
):
    """Robust weights of each fitted channel over time, low-weight spans shaded.

    Parameters
    ----------
    times_s : ndarray, shape (n_times,)
    weights : mapping of channel name to ndarray, shape (n_times,)
        Robust (IRLS) weights in [0, 1].
    threshold : float
        Weight below which a sample counts as down-weighted (dotted line).
    motion_spans : sequence of (start_s, stop_s)
    max_points : int
        Upper bound on points per channel.
    bin_s : float, default=1.0
        Shortest averaging bin in seconds (weights are shown as bin means).
    """
    fig, ax = new_figure(9.0, 2.6, margins_in=_MARGINS_IN)
    for start, stop in motion_spans:
        ax.axvspan(start, max(stop, start + 0.5), color=_MOTION_COLOR, alpha=0.18, linewidth=0)
    for i, (name, w) in enumerate(weights.items()):
        style = channel_style(i, False)
        # Bin means: isolated down-weighted samples fade, runs of them (motion) stand out.
        n_bins = int(min(max_points // 2, max(10, (times_s[-1] - times_s[0]) / bin_s)))
        t, v = thin_curve(times_s, n_bins), thin_curve(w, n_bins)
        ax.plot(t, v, linewidth=0.8, label=plain_label(name), **style.line_kwargs())
    ax.axhline(
        threshold, color="#444444", linestyle=":", linewidth=1.0, label=f"weight {threshold}"
    )
    ax.set_ylim(-0.05, 1.1)
    ax.set_xlabel("time (s)")
    ax.set_ylabel("mean robust weight (unitless)")
    ax.legend(fontsize=7, frameon=False, ncols=4, loc="lower right")
    return fig
