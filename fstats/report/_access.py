"""Reading the fit and group result objects into plain arrays and tables for the report.

The report depends on the fields named in the stage contracts (CONTRACTS.md §5 and
§7).  The few places where a contract names a concept but not an attribute
(robust weights, whitened residuals, block averages) are read here, in one module,
so the rest of the report works on plain data.
"""

from __future__ import annotations

from collections.abc import Mapping

import numpy as np
import pandas as pd

__all__ = [
    "field_of",
    "is_failure",
    "failure_reason",
    "channel_weights",
    "channel_whitened",
    "block_average_curves",
]


def field_of(obj, *names, default=None):
    """The first of ``names`` present on ``obj`` (attribute or mapping key), else ``default``."""
    for name in names:
        if isinstance(obj, Mapping) and name in obj:
            value = obj[name]
        elif not isinstance(obj, Mapping) and hasattr(obj, name):
            value = getattr(obj, name)
        else:
            continue
        if value is not None:
            return value
    return default


def is_failure(channel_fit) -> bool:
    """True for a channel that could not be fitted (a ChannelFailure)."""
    if type(channel_fit).__name__.endswith("Failure"):
        return True
    return field_of(channel_fit, "betas") is None


def failure_reason(channel_fit) -> str:
    """One-line reason of a failed channel."""
    reason = field_of(channel_fit, "reason", "error", "message", "status", default="not fitted")
    return " ".join(str(reason).split())


def channel_weights(channel_fit) -> np.ndarray | None:
    """Robust weights (n_times,) of a fitted channel, or None."""
    w = field_of(channel_fit, "robust_weights", "weights")
    return None if w is None else np.asarray(w, dtype=float)


def channel_whitened(channel_fit) -> np.ndarray | None:
    """Whitened residuals of a fitted channel, or None."""
    w = field_of(channel_fit, "whitened_residuals", "residuals_whitened", "whitened")
    return None if w is None else np.asarray(w, dtype=float)


def _curve(condition, channel, item, method="") -> dict | None:
    times = field_of(item, "time_s", "times_s", "lags_s", "time")
    mean = field_of(item, "mean_pct", "mean", "estimate_pct", "estimate", "average", "values")
    if times is None or mean is None:
        return None
    lo = field_of(item, "ci_low_pct", "ci_low", "lower")
    hi = field_of(item, "ci_high_pct", "ci_high", "upper")
    mean = np.asarray(mean, dtype=float)
    nan = np.full(mean.shape, np.nan)
    return {
        "condition": str(condition),
        "channel": str(channel),
        "method": str(field_of(item, "source", "method", "kind", default=method)),
        "time_s": np.asarray(times, dtype=float),
        "mean": mean,
        "ci_low": nan if lo is None else np.asarray(lo, dtype=float),
        "ci_high": nan if hi is None else np.asarray(hi, dtype=float),
    }


def _curves_from_frame(frame: pd.DataFrame) -> list[dict]:
    cols = set(frame.columns)
    time_col = next((c for c in ("time_s", "times_s", "lag_s") if c in cols), None)
    mean_col = next(
        (c for c in ("mean_pct", "mean", "estimate_pct", "estimate") if c in cols), None
    )
    if time_col is None or mean_col is None or not {"condition", "channel"} <= cols:
        return []
    lo_col = next((c for c in ("ci_low_pct", "ci_low") if c in cols), None)
    hi_col = next((c for c in ("ci_high_pct", "ci_high") if c in cols), None)
    method_col = next((c for c in ("source", "method", "kind") if c in cols), None)
    keys = ["condition", "channel"] + ([method_col] if method_col else [])
    curves = []
    for key, part in frame.groupby(keys, sort=False):
        part = part.sort_values(time_col)
        nan = np.full(len(part), np.nan)
        curves.append(
            {
                "condition": str(key[0]),
                "channel": str(key[1]),
                "method": str(key[2]) if method_col else "",
                "time_s": part[time_col].to_numpy(float),
                "mean": part[mean_col].to_numpy(float),
                "ci_low": part[lo_col].to_numpy(float) if lo_col else nan,
                "ci_high": part[hi_col].to_numpy(float) if hi_col else nan,
            }
        )
    return curves


def block_average_curves(block_averages) -> list[dict]:
    """Block averages of a subject fit as a list of curves.

    Accepts a tidy DataFrame (``condition, channel, [method], time_s, mean[_pct],
    ci_low[_pct], ci_high[_pct]``), a mapping keyed by ``(condition, channel)`` or
    ``(condition, channel, method)``, or a nested mapping
    ``{condition: {channel: item}}`` where an item is a mapping/object with
    ``time_s``, ``mean`` and CI arrays, or a mapping ``{method: item}``.

    Returns
    -------
    list of dict
        ``condition, channel, method, time_s, mean, ci_low, ci_high``.
    """
    if block_averages is None:
        return []
    if isinstance(block_averages, pd.DataFrame):
        return _curves_from_frame(block_averages)
    if hasattr(block_averages, "to_frame") and callable(block_averages.to_frame):
        return _curves_from_frame(block_averages.to_frame())
    curves: list[dict] = []
    if isinstance(block_averages, Mapping):
        for key, value in block_averages.items():
            if isinstance(key, tuple):
                method = key[2] if len(key) > 2 else ""
                curve = _curve(key[0], key[1], value, method)
                if curve is None and isinstance(value, Mapping):
                    curves.extend(
                        c for m, v in value.items() if (c := _curve(key[0], key[1], v, m))
                    )
                elif curve is not None:
                    curves.append(curve)
            elif isinstance(value, Mapping):
                for channel, item in value.items():
                    curve = _curve(key, channel, item)
                    if curve is not None:
                        curves.append(curve)
                    elif isinstance(item, Mapping):
                        curves.extend(
                            c for m, v in item.items() if (c := _curve(key, channel, v, m))
                        )
    else:
        for item in block_averages:
            curve = _curve(field_of(item, "condition"), field_of(item, "channel"), item)
            if curve is not None:
                curves.append(curve)
    return curves
