"""Per-curve screening of g2 before and after fitting: reasons, never exceptions.

Every curve gets a status string: ``"ok"`` or one or more reasons joined by
``"; "``.  Curves with a *blocking* reason are not fitted (their BFi is NaN); curves
with a *quality* reason are fitted but marked, so the flow-series stage can mask them.
A bad curve never stops the recording.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np

__all__ = [
    "BLOCKING_REASONS",
    "QUALITY_REASONS",
    "stack_curves",
    "screen_curves",
    "join_reasons",
]

#: Reasons that stop a curve from being fitted (short keys used in provenance counts).
BLOCKING_REASONS: tuple[str, ...] = (
    "wrong lag count",
    "non-finite g2",
    "g2 below 1",
    "non-decaying g2",
    "zero count rate",
)
#: Reasons that leave a curve fitted but marked.
QUALITY_REASONS: tuple[str, ...] = (
    "low count rate",
    "poor fit",
    "beta out of range",
    "not converged",
)


def stack_curves(curves, n_lags: int) -> tuple[np.ndarray, np.ndarray]:
    """Curves as one (n_curves, n_lags) array, with curves of the wrong length as NaN rows.

    Parameters
    ----------
    curves : ndarray, shape (n_curves, n_lags), or sequence of 1-D arrays
        g2 curves; a sequence may be ragged.
    n_lags : int
        Expected number of lags (the length of the lag vector).

    Returns
    -------
    g2 : ndarray, shape (n_curves, n_lags)
        Float copy (or view) of the curves; wrong-length rows are NaN.
    wrong_length : ndarray of bool, shape (n_curves,)
        True where a curve did not have ``n_lags`` values.
    """
    if isinstance(curves, np.ndarray) and curves.ndim == 2:
        if curves.shape[1] != n_lags:
            out = np.full((curves.shape[0], n_lags), np.nan)
            return out, np.ones(curves.shape[0], dtype=bool)
        return np.asarray(curves, dtype=float), np.zeros(curves.shape[0], dtype=bool)
    if not isinstance(curves, Sequence | np.ndarray):
        raise TypeError("curves must be a 2-D array or a sequence of 1-D arrays")
    out = np.full((len(curves), n_lags), np.nan)
    wrong = np.zeros(len(curves), dtype=bool)
    for i, curve in enumerate(curves):
        values = np.asarray(curve, dtype=float).ravel()
        if values.size == n_lags:
            out[i] = values
        else:
            wrong[i] = True
    return out, wrong


def join_reasons(flags: dict[str, np.ndarray], n_curves: int) -> np.ndarray:
    """Per-curve status strings from boolean flag arrays (in the order of ``flags``).

    Parameters
    ----------
    flags : dict of str to ndarray of bool, shape (n_curves,)
        Reason text -> where it applies.
    n_curves : int

    Returns
    -------
    ndarray of str (object), shape (n_curves,)
        ``"ok"`` or the reasons joined by ``"; "``.
    """
    status = np.full(n_curves, "", dtype=object)
    for reason, where in flags.items():
        where = np.asarray(where, dtype=bool)
        status[where] = np.where(status[where] == "", reason, status[where] + "; " + reason)
    status[status == ""] = "ok"
    return status


def screen_curves(
    g2: np.ndarray,
    fit_mask: np.ndarray,
    *,
    wrong_length: np.ndarray | None = None,
    count_rate_hz: np.ndarray | None = None,
    min_excess: float = 0.0,
    max_tail_ratio: float = 0.5,
    n_edge: int = 3,
) -> dict[str, np.ndarray]:
    """Blocking checks of raw g2 curves, before fitting.

    Parameters
    ----------
    g2 : ndarray, shape (n_curves, n_lags)
    fit_mask : ndarray of bool, shape (n_lags,) or (n_curves, n_lags)
        Lags that take part in the fit (the same for every curve, or per curve).
    wrong_length : ndarray of bool, shape (n_curves,), optional
        From :func:`stack_curves`.
    count_rate_hz : ndarray, shape (n_curves,), optional
        Photon count rate in counts/s; zero or negative blocks the curve.
    min_excess : float, default=0.0
        g2 - 1 averaged over the first quarter of the fitted lags must exceed this, else
        the curve is "g2 below 1" (no correlation left, or a wrongly normalised curve).
    max_tail_ratio : float, default=0.5
        The mean of g2 - 1 over the last quarter of the fitted lags, divided by the
        mean over the first quarter, must stay below this, else "non-decaying g2".
    n_edge : int, default=3
        Least number of lags averaged at either end.

    Returns
    -------
    dict of str to ndarray of bool, shape (n_curves,)
        Keys from :data:`BLOCKING_REASONS`; a curve with one reason is not tested for
        the later ones.

    Notes
    -----
    Thresholds are common practice, not published values.
    """
    n_curves, n_lags = g2.shape
    wrong = np.zeros(n_curves, bool) if wrong_length is None else np.asarray(wrong_length, bool)
    fit_mask = np.asarray(fit_mask, dtype=bool)
    if fit_mask.ndim == 1:  # the same lags for every curve: column slices, no 2-D masks
        cols = np.flatnonzero(fit_mask)
        sub = g2 if cols.size == n_lags else g2[:, cols]
        nonfinite = ~wrong & (~np.isfinite(sub).all(axis=1) | (cols.size < 3))
        open_ = ~(wrong | nonfinite)
        q = max(cols.size // 4, n_edge)
        with np.errstate(invalid="ignore"):
            head_mean = sub[:, :q].mean(axis=1) - 1.0
            tail_mean = sub[:, -q:].mean(axis=1) - 1.0
        return _verdicts(wrong, nonfinite, open_, head_mean, tail_mean, count_rate_hz,
                         min_excess, max_tail_ratio)  # fmt: skip
    mask = np.broadcast_to(fit_mask, g2.shape)
    nonfinite = ~wrong & ~np.all(np.isfinite(g2) | ~mask, axis=1)
    nonfinite |= ~wrong & (mask.sum(axis=1) < 3)
    open_ = ~(wrong | nonfinite)

    excess = np.where(mask, g2 - 1.0, np.nan)
    # head: first quarter of the fitted lags; tail: last quarter (means).  Both
    # average many lags, because single lags of a correlator carry much photon noise.
    order = np.cumsum(mask, axis=1)
    count = mask.sum(axis=1, keepdims=True)
    head = mask & (order <= np.maximum(count // 4, n_edge))
    tail = mask & (order > count - np.maximum(count // 4, n_edge))
    head &= open_[:, None]
    tail &= open_[:, None]
    with np.errstate(invalid="ignore", divide="ignore"):
        head_mean = np.where(head, excess, 0.0).sum(axis=1) / head.sum(axis=1)
        tail_mean = np.where(tail, excess, 0.0).sum(axis=1) / tail.sum(axis=1)
    return _verdicts(wrong, nonfinite, open_, head_mean, tail_mean, count_rate_hz,
                     min_excess, max_tail_ratio)  # fmt: skip


def _verdicts(wrong, nonfinite, open_, head_mean, tail_mean, count_rate_hz, min_excess,
              max_tail_ratio):  # fmt: skip
    """The blocking flags from the head/tail means (each curve gets its first reason)."""
    below = open_ & ~(head_mean > min_excess)
    open_ = open_ & ~below
    flat = open_ & ~(tail_mean < max_tail_ratio * head_mean)
    open_ &= ~flat
    zero = np.zeros(wrong.size, dtype=bool)
    if count_rate_hz is not None:
        rate = np.asarray(count_rate_hz, dtype=float)
        zero = open_ & ~(rate > 0.0)
    return {
        "wrong lag count": wrong,
        "non-finite g2": nonfinite,
        "g2 below 1": below,
        "non-decaying g2": flat,
        "zero count rate": zero,
    }
