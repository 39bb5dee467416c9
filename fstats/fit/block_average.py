"""Block-averaged response time courses per condition and channel, with confidence bands.

Two sources, both in percent change of flow:

* ``"model"``: finite-impulse-response (FIR) estimates.  When the design already has
  FIR columns for a condition (``DesignMatrix.fir_times_s``), their betas are used.
  Otherwise the condition's task columns are replaced by FIR bins (width
  ``fir_bin_s``, from onset to the longest event's end plus ``post_s``), the other
  conditions keep their columns, and the channel is refitted with the main fit's AR
  filter and robust weights (no new AR or robust iterations).  Bands are
  ``1 - alpha`` t intervals per bin from the spectral (diagonal) or model variance.
  Percent = 100 × beta / the channel's baseline flow (see :class:`ChannelFit`).
* ``"epochs"``: the raw flow cut around each onset (``-pre_s`` to the same end),
  each epoch in percent of its own pre-onset mean, averaged on a grid of half FIR
  bins; bands are ``mean ± t_{n-1} sd / sqrt(n)`` across epochs.
"""

from __future__ import annotations

import logging

import numpy as np
import pandas as pd
from scipy import fft, stats

from fstats.fit.autoregressive import whiten, whitened_rows
from fstats.fit.covariance import spectral_sandwich
from fstats.fit.ols import design_rank
from fstats.fit.robust import weighted_least_squares

__all__ = ["BLOCK_AVERAGE_COLUMNS", "block_averages", "fir_columns", "epoch_average"]

logger = logging.getLogger(__name__)

#: Columns of :attr:`SubjectFit.block_averages`.
BLOCK_AVERAGE_COLUMNS: tuple[str, ...] = (
    "condition",
    "channel",
    "source",
    "time_s",
    "mean_pct",
    "ci_low_pct",
    "ci_high_pct",
)


def fir_columns(times_s: np.ndarray, onsets_s: np.ndarray, bin_s: float, n_bins: int) -> np.ndarray:
    """FIR regressors: column j is 1 from ``onset + j·bin_s`` to ``onset + (j+1)·bin_s``.

    Parameters
    ----------
    times_s : ndarray, shape (n_times,)
        Sample times (s).
    onsets_s : ndarray, shape (n_events,)
        Event onsets (s).
    bin_s : float
        Bin width (s).
    n_bins : int
        Number of bins.

    Returns
    -------
    ndarray, shape (n_times, n_bins)
        Unitless indicator columns (overlapping events add up).
    """
    out = np.zeros((times_s.size, n_bins))
    for onset in onsets_s:
        rel = (times_s - onset) / bin_s
        idx = np.floor(rel + 1e-9).astype(int)
        ok = (idx >= 0) & (idx < n_bins)
        out[np.nonzero(ok)[0], idx[ok]] += 1.0
    return out


def epoch_average(
    times_s: np.ndarray,
    flow: np.ndarray,
    onsets_s: np.ndarray,
    *,
    pre_s: float,
    post_s: float,
    step_s: float,
    alpha: float = 0.05,
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Epoch average of flow around onsets, in percent of each epoch's pre-onset mean.

    Parameters
    ----------
    times_s : ndarray, shape (n_times,)
    flow : ndarray, shape (n_times,)
        Flow (any unit; NaN ignored).
    onsets_s : ndarray, shape (n_events,)
    pre_s, post_s : float
        Window from ``-pre_s`` to ``post_s`` after onset (s).
    step_s : float
        Grid step of the averaged curve (s); samples are averaged within each step.
    alpha : float, default=0.05

    Returns
    -------
    time_s, mean_pct, ci_low_pct, ci_high_pct : ndarray, shape (n_grid,)
        Grid-step centres (s) and the across-epoch mean with its ``1 - alpha`` t interval
        (NaN where fewer than two epochs have data).
    """
    edges = np.arange(-pre_s, post_s + 1e-9, step_s)
    centres = edges[:-1] + step_s / 2
    curves = []
    for onset in onsets_s:
        rel = times_s - onset
        if rel[0] > -pre_s or rel[-1] < post_s:
            continue
        base = np.nanmean(flow[(rel >= -pre_s) & (rel < 0)])
        if not np.isfinite(base) or base == 0:
            continue
        inside = (rel >= -pre_s) & (rel < edges[-1])
        idx = np.floor((rel[inside] + pre_s) / step_s).astype(int)
        vals = flow[inside]
        ok = np.isfinite(vals) & (idx < centres.size)
        sums = np.bincount(idx[ok], vals[ok], minlength=centres.size)
        counts = np.bincount(idx[ok], minlength=centres.size)
        with np.errstate(invalid="ignore", divide="ignore"):
            curves.append(100.0 * (sums / counts - base) / base)
    if not curves:
        nan = np.full(centres.size, np.nan)
        return centres, nan, nan.copy(), nan.copy()
    data = np.array(curves)
    n = np.sum(np.isfinite(data), axis=0)
    with np.errstate(invalid="ignore", divide="ignore"):
        mean = np.nanmean(data, axis=0) if data.shape[0] else np.full(centres.size, np.nan)
        sd = np.nanstd(data, axis=0, ddof=1) if data.shape[0] > 1 else np.full(centres.size, np.nan)
        half = stats.t.ppf(1 - alpha / 2, np.maximum(n - 1, 1)) * sd / np.sqrt(n)
    half = np.where(n >= 2, half, np.nan)
    return centres, mean, mean - half, mean + half


def _onsets(recording, design, condition: str) -> np.ndarray | None:
    events = recording.events
    if events is None:
        events = design.info.get("events") if isinstance(design.info, dict) else None
    if events is None or not hasattr(events, "select"):
        return None
    picked = events.select(condition)
    return picked.onsets_s, picked.durations_s


def _model_curve(glm, fit, recording, design, condition, onsets, span_s):
    """FIR curve of one condition for one channel: (time_s, beta, se, dof) or None."""
    cols = fit.conditions.get(condition, ())
    if condition in design.fir_times_s and cols:
        idx = [fit.names.index(c) for c in cols]
        times = np.asarray(design.fir_times_s[condition], dtype=float)
        width = float(np.median(np.diff(times))) if times.size > 1 else glm.fir_bin_s
        tests = [fit.test(np.eye(len(fit.names))[j], alpha=glm.alpha) for j in idx]
        return times + width / 2, tests
    n_bins = int(np.ceil(span_s / glm.fir_bin_s))
    values = design.for_channel(fit.channel)
    keep = [design.names.index(n) for n in fit.names if n not in cols]
    fir = fir_columns(recording.times_s, onsets, glm.fir_bin_s, n_bins)
    x = np.column_stack([fir, values[:, keep]])
    flow = recording.channel_flow(fit.channel)
    valid = np.isfinite(flow) & np.isfinite(x).all(axis=1)
    if design_rank(x[valid]) < x.shape[1]:
        logger.info(
            "no FIR curve for %r on %r: FIR design is rank deficient", condition, fit.channel
        )
        return None
    coefs = fit.ar_coefs
    y0 = np.where(valid, flow, 0.0)
    x0 = np.where(valid[:, None], x, 0.0)
    kept = whitened_rows(valid, coefs.size)
    weights_full = fit.weights[kept]
    w = np.where(np.isfinite(weights_full), weights_full, 0.0)
    yw = whiten(y0, coefs, valid)
    xw = whiten(x0, coefs, valid)
    betas, inv = weighted_least_squares(yw, xw, w)
    resid = yw - xw @ betas
    dof_model = w.sum() - x.shape[1]
    eye = np.eye(x.shape[1])
    tests = []
    if glm.covariance == "spectral" and glm.method != "ols":
        bins = max(
            1,
            int(
                round(glm.smoothing_hz * fft.next_fast_len(yw.size, real=True) / recording.sfreq_hz)
            ),
        )
        spectral = spectral_sandwich(xw, resid, w, inv, smoothing_bins=bins, columns=n_bins)
        cov = spectral.cov
        dofs = spectral.contrast_dof(np.eye(n_bins))
    else:
        cov = (inv * np.sum(w * resid**2) / dof_model)[:n_bins, :n_bins]
        dofs = [dof_model] * n_bins
    from fstats.fit.inference import t_test

    for j in range(n_bins):
        tests.append(t_test(betas[:n_bins], cov, eye[j, :n_bins], dofs[j], alpha=glm.alpha))
    times = (np.arange(n_bins) + 0.5) * glm.fir_bin_s
    return times, tests


def block_averages(glm, recording, design, fits) -> pd.DataFrame:
    """Model (FIR) and epoch time courses for every condition and fitted channel.

    Parameters
    ----------
    glm : SubjectGLM
        Settings (bin width, windows, alpha, covariance).
    recording : Recording
    design : DesignMatrix
    fits : dict of str to ChannelFit or ChannelFailure

    Returns
    -------
    pandas.DataFrame
        Columns :data:`BLOCK_AVERAGE_COLUMNS`; percent change of flow.
    """
    rows = []
    for condition in design.conditions:
        found = _onsets(recording, design, condition)
        if found is None or found[0].size == 0:
            logger.info("no onsets for condition %r: no block averages", condition)
            continue
        onsets, durations = found
        span = float(np.max(durations)) + glm.post_s
        for name, fit in fits.items():
            if not hasattr(fit, "estimate"):
                continue
            curve = _model_curve(glm, fit, recording, design, condition, onsets, span)
            if curve is not None and np.isfinite(fit.baseline_flow) and fit.baseline_flow > 0:
                scale = 100.0 / fit.baseline_flow
                for t_s, test in zip(*curve, strict=False):
                    rows.append(
                        (
                            condition,
                            name,
                            "model",
                            float(t_s),
                            test.estimate * scale,
                            test.ci_low * scale,
                            test.ci_high * scale,
                        )
                    )
            t_s, mean, low, high = epoch_average(
                recording.times_s,
                recording.channel_flow(name),
                onsets,
                pre_s=glm.pre_s,
                post_s=span,
                step_s=glm.fir_bin_s / 2,
                alpha=glm.alpha,
            )
            rows.extend(
                (condition, name, "epochs", float(a), float(b), float(c), float(d))
                for a, b, c, d in zip(t_s, mean, low, high, strict=False)
            )
    return pd.DataFrame(rows, columns=list(BLOCK_AVERAGE_COLUMNS))
