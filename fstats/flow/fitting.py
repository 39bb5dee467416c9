"""Batched fit of BFi (and β) to many g2 curves at once.

All curves of a recording are fitted together, as arrays, in three steps:

1. a starting BFi from the lag at which g2 - 1 falls to β/e (g1 depends on BFi·τ only,
   so one number per geometry turns that lag into a BFi);
2. a grid over log BFi, shared by the curves of one geometry: the least-squares χ² of
   every curve on every grid point (β profiled out, since it enters linearly) comes from
   two matrix products; each curve starts from its best grid point, with the curvature
   of a parabola through its neighbours;
3. a damped Newton iteration in log BFi on the β-profiled χ² (variable projection,
   Golub & Pereyra 1973, with Kaufman's Jacobian): analytic gradient, curvature from
   the grid, then from the secant of the gradient; Levenberg–Marquardt style damping
   rejects steps that raise χ² (Marquardt 1963).  The model comes from a table per
   geometry (g1², its log-slope and log-curvature on nodes 0.002 apart in log BFi,
   expanded to second order: relative error < 1e-9), and small final steps are judged
   on the same expansion about the current point, so a typical curve costs one table
   look-up and one expansion instead of two exact evaluations (two exponentials per lag).

Curves that have converged leave the working set, and curves are processed in chunks
whose per-lag arrays are reused (:class:`fstats.flow.solver._Workspace`), so the memory
held is a few dozen (chunk_size, n_lags) arrays whatever the recording length.
Fitting log BFi keeps BFi positive without bounds; β is kept in (0, BETA_MAX].
"""

from __future__ import annotations

import logging
from dataclasses import dataclass

import numpy as np

from fstats.flow.forward import OBSERVABLES, _geometry
from fstats.flow.noise import g2_noise_sd
from fstats.flow.screening import BLOCKING_REASONS, join_reasons, screen_curves, stack_curves
from fstats.flow.solver import (
    _GEOM_KEYS,
    BETA_MAX,
    _buf,
    _geom_rows,
    _grid_start,
    _lm,
    _ModelTable,
    _Workspace,
    decay_product_cm2,
)

__all__ = ["WEIGHTINGS", "G2FitResult", "fit_g2"]

logger = logging.getLogger(__name__)

#: How lags are weighted: equally, or by the expected g2 noise (see :mod:`fstats.flow.noise`).
#: An explicit array of standard deviations may be passed instead.
WEIGHTINGS: tuple[str, ...] = ("uniform", "noise-model")

# a chunk's model table spans the 1st-99th percentiles of its starting guesses ± this
# (log BFi): the start grid reaches 0.6 beyond them, the iteration rarely further
_TABLE_REACH = 1.0


@dataclass(frozen=True, eq=False)
class G2FitResult:
    """Per-curve results of :func:`fit_g2`.

    Parameters
    ----------
    bfi_cm2_s : ndarray, shape (n_curves,)
        Fitted blood-flow index α·Db in cm²/s; NaN for curves not fitted.
    beta : ndarray, shape (n_curves,)
        Fitted (or fixed) coherence factor β; NaN for curves not fitted.
    reduced_chi2 : ndarray, shape (n_curves,)
        Weighted sum of squared residuals / (lags used - parameters).  With uniform
        weighting this is the mean squared g2 residual (unitless²).
    rms_residual : ndarray, shape (n_curves,)
        Unweighted root-mean-square g2 residual over the lags used.
    misfit_ratio : ndarray, shape (n_curves,)
        Σ r² / (½ Σ (Δr)²) of the weighted residuals over consecutive used lags: about
        1 for a curve fitted down to independent noise, large for a systematic misfit.
    n_iter : ndarray of int, shape (n_curves,)
        Levenberg–Marquardt iterations taken.
    converged : ndarray of bool, shape (n_curves,)
    n_lags_used : ndarray of int, shape (n_curves,)
    fitted : ndarray of bool, shape (n_curves,)
        False where a blocking screening reason stopped the fit.
    status : ndarray of str (object), shape (n_curves,)
        ``"ok"`` or the reasons, joined by ``"; "`` (see :mod:`fstats.flow.screening`).
    count_rate_hz : ndarray, shape (n_curves,), optional
        Photon count rate per curve in counts/s, where provided.
    settings : dict
        The options of the fit, for provenance.
    """

    bfi_cm2_s: np.ndarray
    beta: np.ndarray
    reduced_chi2: np.ndarray
    rms_residual: np.ndarray
    misfit_ratio: np.ndarray
    n_iter: np.ndarray
    converged: np.ndarray
    n_lags_used: np.ndarray
    fitted: np.ndarray
    status: np.ndarray
    count_rate_hz: np.ndarray | None
    settings: dict

    @property
    def good(self) -> np.ndarray:
        """Curves fitted with no quality flag, shape (n_curves,)."""
        return self.fitted & (self.status == "ok")

    def reason_counts(self) -> dict[str, int]:
        """How many curves carry each reason (a curve may carry several)."""
        counts: dict[str, int] = {}
        for text in self.status:
            if text == "ok":
                continue
            for reason in str(text).split("; "):
                counts[reason] = counts.get(reason, 0) + 1
        return counts


def _group_ids(columns):
    """Integer id per row for the distinct rows of equal-length 1-D columns, and the first
    row of each id (1-D sorts of integer codes; faster than ``np.unique(axis=0)``)."""
    key = np.zeros(columns[0].size, dtype=np.int64)
    for column in columns:
        _, code = np.unique(column, return_inverse=True)
        key = key * (int(code.max(initial=0)) + 1) + code.ravel()
        _, key = np.unique(key, return_inverse=True)  # keep the combined code small
        key = key.ravel()
    _, first = np.unique(key, return_index=True)
    return key, first


def _per_curve(value, n_curves, name):
    arr = np.asarray(value, dtype=float)
    if arr.ndim == 0:
        return np.full(n_curves, float(arr))
    if arr.shape != (n_curves,):
        raise ValueError(f"{name} must be a scalar or have shape ({n_curves},), got {arr.shape}")
    return arr


def fit_g2(
    g2,
    lags_s,
    *,
    separation_cm,
    mua_per_cm=0.1,
    musp_per_cm=10.0,
    n: float = 1.4,
    wavelength_nm: float = 785.0,
    reff: float | None = None,
    observable: str = "fluence",
    beta="fit",
    fit_range_s: tuple[float, float] | None = None,
    decay_floor: float | None = None,
    weighting="uniform",
    count_rate_hz=None,
    integration_time_s=None,
    min_count_rate_hz: float = 2000.0,
    min_beta: float = 0.02,
    max_misfit_ratio: float = 4.0,
    max_reduced_chi2: float | None = None,
    max_iter: int = 50,
    xtol: float = 1e-7,
    ftol: float = 1e-6,
    chunk_size: int = 2048,
) -> G2FitResult:
    """Fit BFi (cm²/s) and β to every g2 curve at once with the semi-infinite model.

    Parameters
    ----------
    g2 : ndarray, shape (n_curves, n_lags), or sequence of 1-D arrays
        Measured intensity autocorrelations; a ragged sequence is allowed (curves of the
        wrong length are flagged "wrong lag count").
    lags_s : array_like, shape (n_lags,)
        Lag times in s, increasing, > 0.
    separation_cm : float or ndarray, shape (n_curves,)
        Source-detector separation in cm.
    mua_per_cm, musp_per_cm : float or ndarray, shape (n_curves,), default=0.1, 10.0
        Absorption and reduced scattering coefficients in 1/cm (adult-head defaults, see
        :data:`fstats.flow.forward.ADULT_HEAD_DEFAULTS`).
    n : float, default=1.4
        Tissue refractive index.
    wavelength_nm : float, default=785.0
        Laser wavelength in nm.
    reff : float, optional
        Effective reflection coefficient; default from ``n`` (exact Fresnel integral).
    observable : {"fluence", "flux"}, default="fluence"
        Detected quantity of the forward model (see :func:`g1_semi_infinite`).
    beta : "fit" or float, default="fit"
        ``"fit"`` fits β per curve; a number fixes β for every curve.
    fit_range_s : (float, float), optional
        Only lags with ``lo <= τ <= hi`` (s) take part.
    decay_floor : float, optional
        Fit each curve only until (g2 - 1) falls below ``decay_floor`` · β (β from the
        curve's first lags): the first k lags of the range, with k the number of lags
        at or above the floor (robust to noise crossing the floor early).
    weighting : {"uniform", "noise-model"} or ndarray, default="uniform"
        ``"uniform"``: equal weights.  ``"noise-model"``: 1/σ(τ) from
        :func:`fstats.flow.noise.g2_noise_sd`, evaluated at the starting values (needs
        ``count_rate_hz`` and ``integration_time_s``).  An array of σ, shape (n_lags,) or
        (n_curves, n_lags), is used as given.
    count_rate_hz : float or ndarray, shape (n_curves,), optional
        Photon count rate per curve in counts/s: checked (zero blocks the fit, below
        ``min_count_rate_hz`` marks "low count rate") and used by the noise model.
    integration_time_s : float or ndarray, shape (n_curves,), optional
        Averaging time of each curve in s (the reciprocal of the curve rate).
    min_count_rate_hz : float, default=2000.0
        Count rate under which a curve is marked "low count rate" (ours).
    min_beta : float, default=0.02
        Fitted β at or below this (or at :data:`BETA_MAX`) marks "beta out of range".
    max_misfit_ratio : float, default=4.0
        Curves whose :attr:`G2FitResult.misfit_ratio` exceeds this are marked "poor fit".
    max_reduced_chi2 : float, optional
        Also mark "poor fit" above this reduced χ² (meaningful with a noise model).
    max_iter : int, default=50
    xtol : float, default=1e-7
        Convergence when the log-BFi step (≈ relative BFi step) falls below this ...
    ftol : float, default=1e-6
        ... or when an accepted step lowers χ² by less than this fraction.  With ~100 lags
        (χ² ≈ 100) that is Δχ² ≈ 1e-4: the estimate is then within about 1 % of its own
        standard error of the minimum (Δχ² = (δ/SE)²).  MINPACK's default, used by
        ``scipy.optimize.curve_fit``, is 1.5e-8; pass that for a tighter stop.
    chunk_size : int, default=2048
        Curves fitted together.  Memory held is about 25 reused arrays of
        (chunk_size, n_lags) floats plus a model table per geometry (a few MB); smaller
        chunks cost more in per-chunk overhead (~2 ms each), larger ones little.

    Returns
    -------
    G2FitResult

    Notes
    -----
    Model: g2(τ) = 1 + β g1(τ; BFi)², g1 from :func:`fstats.flow.forward.g1_semi_infinite`.
    Starting values: β from the mean of g2 - 1 over the first three fitted lags (used
    for the decay floor and the noise model); BFi from the lag at which (g2 - 1)/β
    falls to 1/e, refined on a grid (module notes).  The iteration minimises the same
    weighted least-squares χ² as ``scipy.optimize.curve_fit`` with ``sigma`` (Golub &
    Pereyra 1973, SIAM J Numer Anal 10:413; Marquardt 1963, J SIAM 11:431).
    """
    if observable not in OBSERVABLES:
        raise ValueError(f"observable must be one of {OBSERVABLES}, got {observable!r}")
    lags = np.asarray(lags_s, dtype=float)
    if lags.ndim != 1 or lags.size < 3 or not np.all(np.diff(lags) > 0) or lags[0] <= 0:
        raise ValueError("lags_s must be an increasing 1-D array of >= 3 positive lags")
    fit_beta = isinstance(beta, str)
    if fit_beta and beta != "fit":
        raise ValueError(f"beta must be 'fit' or a number, got {beta!r}")
    n_lags = lags.size
    curves, wrong_length = stack_curves(g2, n_lags)
    n_curves = curves.shape[0]
    sigma = None
    if not isinstance(weighting, str):
        sigma = np.asarray(weighting, dtype=float)
        if sigma.shape not in {(n_lags,), (n_curves, n_lags)}:
            raise ValueError(f"sigma array must have shape ({n_lags},) or ({n_curves}, {n_lags})")
    elif weighting not in WEIGHTINGS:
        raise ValueError(f"weighting must be one of {WEIGHTINGS} or an array, got {weighting!r}")
    elif weighting == "noise-model" and (count_rate_hz is None or integration_time_s is None):
        raise ValueError("weighting='noise-model' needs count_rate_hz and integration_time_s")

    per_curve = {
        "separation_cm": _per_curve(separation_cm, n_curves, "separation_cm"),
        "mua_per_cm": _per_curve(mua_per_cm, n_curves, "mua_per_cm"),
        "musp_per_cm": _per_curve(musp_per_cm, n_curves, "musp_per_cm"),
    }
    rate = None if count_rate_hz is None else _per_curve(count_rate_hz, n_curves, "count_rate_hz")
    t_int = None
    if integration_time_s is not None:
        t_int = _per_curve(integration_time_s, n_curves, "integration_time_s")
    in_range = np.ones(n_lags, dtype=bool)
    if fit_range_s is not None:
        lo, hi = fit_range_s
        in_range = (lags >= lo) & (lags <= hi)
        if in_range.sum() < 3:
            raise ValueError(f"fit_range_s {fit_range_s} keeps fewer than 3 lags")

    out = {
        "bfi": np.full(n_curves, np.nan),
        "beta": np.full(n_curves, np.nan),
        "chi2": np.full(n_curves, np.nan),
        "rms": np.full(n_curves, np.nan),
        "misfit": np.full(n_curves, np.nan),
        "n_iter": np.zeros(n_curves, dtype=int),
        "converged": np.zeros(n_curves, dtype=bool),
        "n_used": np.zeros(n_curves, dtype=int),
    }
    flags = {reason: np.zeros(n_curves, dtype=bool) for reason in BLOCKING_REASONS}
    # per-curve geometry and decay products, once (few distinct geometries: one per channel)
    geom_all = _geometry(
        per_curve["separation_cm"], per_curve["mua_per_cm"], per_curve["musp_per_cm"],
        n, wavelength_nm, reff,
    )  # fmt: skip
    geom_all = {k: np.broadcast_to(geom_all[k], (n_curves,)).copy() for k in _GEOM_KEYS}
    group_all, first = _group_ids([geom_all[k] for k in _GEOM_KEYS])
    distinct = {k: v[first] for k, v in geom_all.items()}  # usually one per channel
    x_half = decay_product_cm2(np.exp(-0.5), distinct, observable)[group_all]
    noise_model = sigma is None and weighting == "noise-model"
    x_e = decay_product_cm2(np.exp(-1.0), distinct, observable)[group_all] if noise_model else None
    ws = _Workspace()
    tables: dict = {}  # per geometry id: model tables shared by its chunks
    for start in range(0, n_curves, chunk_size):
        sl = slice(start, min(start + chunk_size, n_curves))
        chunk_flags = _fit_chunk(
            curves[sl],
            wrong_length[sl],
            lags,
            in_range,
            {k: v[sl] for k, v in geom_all.items()},
            group_all[sl],
            x_half[sl],
            None if x_e is None else x_e[sl],
            observable=observable,
            beta=beta,
            fit_beta=fit_beta,
            decay_floor=decay_floor,
            sigma=None if sigma is None else (sigma if sigma.ndim == 1 else sigma[sl]),
            weighting=weighting if sigma is None else "array",
            rate=None if rate is None else rate[sl],
            t_int=None if t_int is None else t_int[sl],
            max_iter=max_iter,
            xtol=xtol,
            ftol=ftol,
            out={k: v[sl] for k, v in out.items()},
            ws=ws,
            tables=tables,
        )
        for reason, where in chunk_flags.items():
            flags[reason][sl] = where
    fitted = ~np.any(np.stack(list(flags.values())), axis=0)
    quality = {
        "low count rate": fitted & (rate < min_count_rate_hz)
        if rate is not None
        else np.zeros(n_curves, bool),
        # a residual at rounding level (noise-free input) is never a poor fit
        "poor fit": fitted & (out["misfit"] > max_misfit_ratio) & (out["rms"] > 1e-9),
        "beta out of range": fitted & ~((out["beta"] > min_beta) & (out["beta"] < BETA_MAX)),
        "not converged": fitted & ~out["converged"],
    }
    if max_reduced_chi2 is not None:
        quality["poor fit"] |= fitted & (out["chi2"] > max_reduced_chi2)
    status = join_reasons({**flags, **quality}, n_curves)
    settings = {
        "model": "semi-infinite correlation diffusion, extrapolated-zero boundary",
        "observable": observable,
        "beta": "fit" if fit_beta else float(beta),
        "fit_range_s": None if fit_range_s is None else [float(v) for v in fit_range_s],
        "decay_floor": decay_floor,
        "weighting": weighting if sigma is None else "sigma array",
        "n": float(n),
        "wavelength_nm": float(wavelength_nm),
        "reff": None if reff is None else float(reff),
        "min_count_rate_hz": float(min_count_rate_hz),
        "min_beta": float(min_beta),
        "max_misfit_ratio": float(max_misfit_ratio),
        "max_reduced_chi2": max_reduced_chi2,
        "xtol": xtol,
        "ftol": ftol,
        "max_iter": max_iter,
    }
    logger.debug("fitted %d of %d g2 curves", int(fitted.sum()), n_curves)
    return G2FitResult(
        bfi_cm2_s=out["bfi"],
        beta=out["beta"],
        reduced_chi2=out["chi2"],
        rms_residual=out["rms"],
        misfit_ratio=out["misfit"],
        n_iter=out["n_iter"],
        converged=out["converged"] & fitted,
        n_lags_used=out["n_used"],
        fitted=fitted,
        status=status,
        count_rate_hz=rate,
        settings=settings,
    )


def _fit_chunk(
    y_all,
    wrong,
    lags,
    in_range,
    geom,
    group,
    x_half,
    x_e,
    *,
    observable,
    beta,
    fit_beta,
    decay_floor,
    sigma,
    weighting,
    rate,
    t_int,
    max_iter,
    xtol,
    ftol,
    out,
    ws=None,
    tables=None,
):
    """Screen and fit one chunk of curves, writing into the views in ``out``."""
    n_chunk, n_lags = y_all.shape
    flags = screen_curves(y_all, in_range, wrong_length=wrong, count_rate_hz=rate)
    ok = ~np.any(np.stack(list(flags.values())), axis=0)
    idx = np.flatnonzero(ok)
    if idx.size == 0:
        return flags
    every = idx.size == n_chunk  # the usual case: no fancy-index copies
    n_ok = idx.size
    y = y_all if every else y_all[idx]  # read only
    group = group if every else group[idx]
    if np.all(group == group[0]):  # one geometry: arrays of one row, broadcast
        geom = {k: v[:1, None] for k, v in geom.items()}
    else:
        geom = {k: (v if every else v[idx])[:, None] for k, v in geom.items()}

    # starting values
    first = np.argmax(in_range)
    head = slice(first, first + 3)
    beta0 = np.clip(np.mean(y[:, head], axis=1) - 1.0, 0.01, 1.5)
    b_start = beta0 if fit_beta else np.full(n_ok, float(beta))
    ym1 = np.subtract(y, 1.0, out=_buf(ws, "ym1", n_ok, n_lags))  # g2 - 1
    log_lags = np.log(lags)
    full = decay_floor is None and bool(in_range.all())  # the default: all lags, all curves
    if full:
        mask = None
        # lags where (g2 - 1)/β > e^{-1}, i.e. g1 > e^{-1/2}
        above = np.count_nonzero(ym1 > (np.exp(-1.0) * b_start)[:, None], axis=1)
        pos_lo = np.clip(above - 1, 0, n_lags - 1)
        pos_hi = np.clip(above, 0, n_lags - 1)
        n_fit = np.full(n_ok, n_lags)
    else:
        ratio = ym1 / b_start[:, None]
        mask = np.broadcast_to(in_range, y.shape).copy()
        if decay_floor is not None:
            keep = np.sum(mask & (ratio >= decay_floor), axis=1)
            keep = np.maximum(keep, 5)
            rank = np.cumsum(mask, axis=1)
            mask &= rank <= keep[:, None]
        above = np.sum(mask & (ratio > np.exp(-1.0)), axis=1)
        rank = np.cumsum(mask, axis=1)
        n_fit = mask.sum(1)
        # lag index of the `above`-th and next fitted lag (robust 1/e crossing)
        pos_lo = np.argmax(rank >= np.maximum(above, 1)[:, None], axis=1)
        pos_hi = np.argmax(rank >= np.minimum(above + 1, n_fit)[:, None], axis=1)
    log_tau_e = 0.5 * (log_lags[pos_lo] + log_lags[pos_hi])
    log_tau_e = np.where(above >= n_fit, log_lags[pos_hi] + np.log(2.0), log_tau_e)
    u0 = np.log(x_half if every else x_half[idx]) - log_tau_e

    w = _buf(ws, "w", n_ok, n_lags)
    if sigma is not None:
        s = np.broadcast_to(sigma, (n_chunk, n_lags))
        s = s if every else s[idx]
        np.divide(1.0, s, out=w)
    elif weighting == "noise-model":
        x_e = x_e if every else x_e[idx]
        gamma = np.exp(u0) / x_e  # 1/s: g1 ≈ e^{-Γτ}, Γ = BFi0 / (BFi·τ at g1 = 1/e)
        s = g2_noise_sd(
            lags,
            beta=b_start,
            decay_rate_hz=gamma,
            count_rate_hz=rate if every else rate[idx],
            integration_time_s=t_int if every else t_int[idx],
        )
        np.divide(1.0, s, out=w)
    else:
        s = None
        w.fill(1.0)
    if not full:
        w[~mask] = 0.0
        ym1[~mask] = 0.0  # masked lags carry zero weight; keep them finite
    wy = np.multiply(w, ym1, out=_buf(ws, "wy", n_ok, n_lags))

    fixed = None if fit_beta else b_start
    u_start, curv0, model, n_keep, slowest = _grid_start(
        wy, w, lags, geom, observable, u0, fixed, group, ws
    )
    table = None
    if tables is not None and np.all(group == group[0]):  # one geometry: tabulate its model
        lo, hi = np.percentile(u0, [1.0, 99.0]) + np.array([-_TABLE_REACH, _TABLE_REACH])
        table = tables.get(group[0])
        if table is None or not table.covers(lo, hi, n_keep):
            if table is not None and max(hi, table.hi) - min(lo, table.lo) < 6.0:
                # grow the old range, with room to spare on the side that fell short
                lo = table.lo if lo >= table.lo else lo - 0.5
                hi = table.hi if hi <= table.hi else hi + 0.5
            geom_1 = {k: v[:1] for k, v in geom.items()}
            width = min(n_keep + 8, n_lags)  # a little spare: chunks differ by a few lags
            table = _ModelTable(geom_1, lags[:width], observable, lo, hi)
            tables[group[0]] = table
    # iterate on the lags that matter; the others add a constant (wy²) to χ²
    cut = slice(0, n_keep)
    u, b, n_iter, converged, resid = _lm(
        ym1[:, cut], w[:, cut], lags[cut], geom, observable, u_start, b_start, fit_beta,
        max_iter, xtol, ftol, model=(model[0][:, cut], model[1][:, cut]), curv0=curv0,
        wy=wy[:, cut], ws=ws, table=table,
    )  # fmt: skip
    if n_keep < n_lags:
        res_full = _buf(ws, "_tail", n_ok, n_lags)  # the solver's scratch is free now
        res_full[:, :n_keep] = resid
        res_full[:, n_keep:] = wy[:, n_keep:]
        resid = res_full
        slow = np.flatnonzero(u < slowest)  # ended slower than the grid: refit on all lags
        if slow.size:
            u_s, b_s, it_s, conv_s, r_s = _lm(
                ym1[slow] + 1.0, w[slow], lags, _geom_rows(geom, slow),
                observable, u[slow], b[slow], fit_beta, max_iter, xtol, ftol,
            )  # fmt: skip
            u[slow], b[slow], resid[slow] = u_s, b_s, r_s
            n_iter[slow] += it_s
            converged[slow] = conv_s
    n_used = n_fit
    n_par = 2 if fit_beta else 1
    chi = np.einsum("ij,ij->i", resid, resid)
    raw = _buf(ws, "_q", n_ok, n_lags)  # unweighted residual on the lags used
    if full and w.min() > 0.0:
        np.divide(resid, w, out=raw)
    else:
        raw.fill(0.0)
        np.divide(resid, w, out=raw, where=w > 0)
    diff = np.subtract(resid[:, 1:], resid[:, :-1], out=_buf(ws, "_k", n_ok, n_lags - 1))
    if not full:
        diff[~(mask[:, 1:] & mask[:, :-1])] = 0.0
    with np.errstate(divide="ignore", invalid="ignore"):
        misfit = chi / (0.5 * np.einsum("ij,ij->i", diff, diff))
    out["bfi"][idx] = np.exp(u)
    out["beta"][idx] = b
    out["chi2"][idx] = chi / np.maximum(n_used - n_par, 1)
    out["rms"][idx] = np.sqrt(np.einsum("ij,ij->i", raw, raw) / n_used)
    out["misfit"][idx] = misfit
    out["n_iter"][idx] = n_iter
    out["converged"][idx] = converged
    out["n_used"][idx] = n_used
    return flags
