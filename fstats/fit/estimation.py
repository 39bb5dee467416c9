"""One channel's GLM: OLS, iterated AR(p) prewhitening, and AR-IRLS (pure arrays in, arrays out)."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import fft

from fstats.fit.autoregressive import fit_ar, whiten, whitened_rows
from fstats.fit.covariance import SpectralCovariance, spectral_sandwich
from fstats.fit.filtering import FilteredRows
from fstats.fit.ols import gram_rank, ordinary_least_squares
from fstats.fit.robust import TUKEY_C, NormalEquations
from fstats.fit.rows_irls import RowsOperator, irls_rows
from fstats.fit.scratch import scratch
from fstats.fit.whitener import Whitener

__all__ = ["METHODS", "ChannelEstimate", "ChannelFitError", "estimate_channel"]

#: Fit methods: ordinary least squares, AR(p) prewhitening, AR prewhitening + robust IRLS.
METHODS: tuple[str, ...] = ("ols", "ar", "ar-irls")


class ChannelFitError(ValueError):
    """A channel cannot be fitted; the message is a one-line reason for the results table."""


@dataclass(frozen=True, eq=False)
class ChannelEstimate:
    """Raw estimation output for one channel (see :class:`fstats.fit.subject_fit.ChannelFit`).

    Parameters
    ----------
    betas : ndarray, shape (k,)
        Coefficients (flow unit per regressor unit).
    cov : ndarray, shape (k, k)
        Coefficient covariance.
    dof : float
        Effective residual degrees of freedom.
    ar_coefs : ndarray, shape (p,)
        Final AR coefficients (empty for OLS).
    fitted : ndarray, shape (n_times,)
        ``X β`` (NaN on excluded rows).
    residuals : ndarray, shape (n_times,)
        ``y - X β`` (NaN on excluded rows).
    whitened_residuals : ndarray, shape (n_times,)
        Residuals of the whitened regression (NaN on rows dropped by whitening).
    weights : ndarray, shape (n_times,)
        Robust weights (1 for OLS/AR; NaN on rows not in the final regression).
    scale : float
        Residual scale of the final regression (flow unit).
    n_used : int
        Rows in the final regression.
    n_iter : int
        AR iterations used (0 for OLS).
    converged : bool
        Whether the AR / IRLS iterations settled.
    ar_order_bic : ndarray
        BIC curve of the last AR order search (empty for OLS).
    spectral : SpectralCovariance or None
        The frequency-domain sandwich behind ``cov`` (None for model-based covariance);
        gives per-contrast Satterthwaite degrees of freedom.
    whitened_design : ndarray, shape (k, n_used) or None
        The final whitened regressors on the kept rows, one per row (AR modes), for
        callers that build on the whitened regression; the subject-level fit drops it
        after use (it is as large as the design).
    whitened_gram : ndarray, shape (k, k) or None
        ``X̃'WX̃`` of the final whitened regression, robust weights included (AR-IRLS).
    """

    betas: np.ndarray
    cov: np.ndarray
    dof: float
    ar_coefs: np.ndarray
    fitted: np.ndarray
    residuals: np.ndarray
    whitened_residuals: np.ndarray
    weights: np.ndarray
    scale: float
    n_used: int
    n_iter: int
    converged: bool
    ar_order_bic: np.ndarray
    spectral: SpectralCovariance | None = None
    whitened_design: np.ndarray | None = None
    whitened_gram: np.ndarray | None = None

    def contrast_dof(self, weights: np.ndarray) -> float:
        """Effective degrees of freedom of a contrast row ``weights`` (shape (k,))."""
        if self.spectral is None:
            return self.dof
        return self.spectral.contrast_dof(weights)


def _prepare(flow: np.ndarray, design: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Valid rows, the joint series ``[y; X']`` as rows (zero on invalid rows), their Gram.

    Raises :class:`ChannelFitError` for all-NaN or constant flow, too few samples and a
    rank-deficient design (rank from the column-scaled Gram, as ``design_rank``).
    """
    valid = np.isfinite(flow)
    if not np.isfinite(design).all():
        valid &= np.isfinite(design).all(axis=1)
    n_valid = int(valid.sum())
    k = design.shape[1]
    if n_valid == 0:
        raise ChannelFitError("no valid samples (all NaN)")
    if n_valid <= k:
        raise ChannelFitError(f"{n_valid} valid samples for {k} regressors")
    if np.ptp(flow[valid]) == 0:
        raise ChannelFitError("constant flow (zero variance)")
    rows, gram = _joint_rows(flow, design, valid)
    rank = gram_rank(gram[1:, 1:])
    if rank < k:
        raise ChannelFitError(f"design is rank deficient (rank {rank} < {k} columns)")
    return valid, rows, gram


def _joint_rows(
    flow: np.ndarray, design: np.ndarray, valid: np.ndarray
) -> tuple[np.ndarray, np.ndarray]:
    """``[y; X']`` as rows, zero on invalid samples, and its Gram matrix."""
    k = design.shape[1]
    rows = scratch("joint_rows", (k + 1, flow.shape[0]))
    rows[0] = flow
    for start in range(0, flow.shape[0], 4096):  # transpose in cache-sized blocks
        rows[1:, start : start + 4096] = design[start : start + 4096].T
    if not valid.all():
        rows[:, ~valid] = 0.0
    return rows, rows @ rows.T


def _whitened_ols(whitener: Whitener, coefs: np.ndarray) -> tuple[np.ndarray, NormalEquations]:
    """OLS of the whitened flow on the whitened design, from the Gram matrix when possible."""
    gram = whitener.gram(coefs)
    if gram is not None:
        try:
            normal = NormalEquations(gram[1:, 1:])
        except np.linalg.LinAlgError:
            pass  # ill-conditioned: solve from the whitened rows below
        else:
            return normal.solve(gram[1:, 0]), normal
    white = whitener.apply(coefs)
    return _solve_joint(white, white @ white.T)


def _robust_start(
    flow0: np.ndarray,
    xrows: np.ndarray,
    valid: np.ndarray,
    betas: np.ndarray,
    normal: NormalEquations,
    tukey_c: float,
) -> np.ndarray:
    """A loose bisquare fit of the raw (unwhitened) regression, to start AR-IRLS from.

    The first AR model is then fitted to residuals in which motion spikes are already
    down-weighted instead of OLS residuals, which usually saves AR rounds; the AR-IRLS
    fixed point does not depend on the start.  Steps use the factored OLS Gram.
    """
    if valid.all():
        return irls_rows(flow0, xrows, betas, c=tukey_c, tol=_START_TOL, normal=normal).betas
    return irls_rows(
        flow0[valid], np.ascontiguousarray(xrows[:, valid]), betas, c=tukey_c, tol=_START_TOL,
        normal=normal,
    ).betas  # fmt: skip


def _solve_joint(rows: np.ndarray, gram: np.ndarray) -> tuple[np.ndarray, NormalEquations]:
    """Least squares of row 0 on the other rows of ``rows`` from their joint Gram matrix."""
    normal = NormalEquations(gram[1:, 1:], rows[1:])
    if normal.cholesky:
        return normal.solve(gram[1:, 0]), normal
    return normal.lstsq(rows[0]), normal


#: Relative tolerance of the robust start (a bisquare fit of the unwhitened regression).
_START_TOL = 1e-2

#: Relative tolerance of the first round's IRLS, whose AR filter is re-estimated anyway.
_FIRST_ROUND_TOL = 1e-2

#: Later rounds solve their IRLS to this share of the previous round's change (at least
#: to a tenth of ``tol``): early AR filters are provisional, so their robust fits need
#: not be exact.  The last round's IRLS tolerance is at most ``0.1 tol`` when the plain
#: change rule stops the rounds, at most ``tol`` when the extrapolated rule does.
_ROUND_TOL_SHARE = 1e-3


def estimate_channel(
    flow: np.ndarray,
    design: np.ndarray,
    *,
    method: str = "ar-irls",
    max_ar_order: int = 80,
    ar_order: int | None = None,
    ar_estimator: str = "mle",
    max_iter: int = 10,
    tol: float = 1e-5,
    tukey_c: float = TUKEY_C,
    covariance: str = "spectral",
    smoothing_hz: float = 0.005,
    sfreq_hz: float = 20.0,
) -> ChannelEstimate:
    """Fit one channel's flow to a design matrix.

    Parameters
    ----------
    flow : ndarray, shape (n_times,)
        Flow (cm²/s or relative); NaN marks missing samples, whose rows are excluded.
    design : ndarray, shape (n_times, k)
        Design matrix; rows with NaN are excluded too.
    method : {"ols", "ar", "ar-irls"}, default="ar-irls"
        Ordinary least squares; iterated AR(p) prewhitening; AR prewhitening with
        Tukey-bisquare IRLS (Barker, Aarabi & Huppert 2013).
    max_ar_order : int, default=80
        Largest AR order for the BIC search (4 s of samples at 20 Hz).
    ar_order : int, optional
        A fixed AR order instead of the BIC search.
    ar_estimator : {"mle", "adjusted"}, default="mle"
        Yule-Walker autocovariance normalisation (``"adjusted"`` reproduces
        statsmodels ``yule_walker``'s default, used by GLSAR).
    max_iter : int, default=10
        Largest number of AR re-estimation rounds.
    tol : float, default=1e-5
        Stop when the fitted values change by less than ``tol`` times the residual norm
        from one AR round to the next (AR-IRLS also stops when the changes still to
        come, extrapolated geometrically from the last two rounds, add up to less than
        ``tol / 2``; the last round's IRLS is then solved to a tolerance of at most
        ``tol``, and to at most ``0.1 tol`` when the first rule stops).
    tukey_c : float, default=4.685
        Bisquare tuning constant.

    Returns
    -------
    ChannelEstimate

    Raises
    ------
    ChannelFitError
        All-NaN or constant flow, fewer samples than regressors, rank-deficient design.

    Notes
    -----
    AR modes start from OLS, then repeat: residuals ``r = y - Xβ`` on the original
    scale → AR(p) by Yule-Walker with p chosen by BIC (or fixed) → whiten y and X →
    OLS (``"ar"``) or bisquare IRLS (``"ar-irls"``) on the whitened rows.  The
    covariance is ``s² (X̃'WX̃)^-1`` with ``s² = Σ w ẽ² / (Σ w - k)`` and the effective
    degrees of freedom are ``Σ w - k`` (``W = I`` without robust weighting), computed
    on the whitened rows.  With ``covariance="spectral"`` (default) the covariance is
    the frequency-domain sandwich of :mod:`fstats.fit.covariance` instead; for
    AR-IRLS its bread is ``(X̃' diag(ψ'(u)) X̃)^-1`` with the bisquare derivative ψ'
    (Huber's M-estimator sandwich), and its meat the spectrum of ``ψ = w ẽ``.

    Without missing samples, AR-IRLS never whitens the whole design in double
    precision during its rounds: round 1 factors a single-precision ``X̃'WX̃``
    (block-Toeplitz FIR, :mod:`fstats.fit.filtering`) as its preconditioner, every
    round takes its IRLS steps through the filtered-design operator with that or the
    previous round's factor and an exact line search, and the final filter's rows are
    formed once, in double precision, for the covariance.  Early rounds solve their
    IRLS loosely (their AR filter is provisional); the path changes, the fixed point
    does not.
    """
    if method not in METHODS:
        raise ValueError(f"method must be one of {METHODS}, not {method!r}")
    flow = np.asarray(flow, dtype=float)
    design = np.asarray(design, dtype=float)
    valid, rows, gram = _prepare(flow, design)
    n_times, k = design.shape
    nan = np.full(n_times, np.nan)
    if method == "ols":
        ols = ordinary_least_squares(flow[valid], design[valid])
        betas = ols.betas[:, 0]
        fitted = _masked(design, betas, valid)
        resid = np.where(valid, flow - fitted, np.nan)
        return ChannelEstimate(
            betas=betas,
            cov=ols.cov[0],
            dof=float(ols.dof),
            ar_coefs=np.zeros(0),
            fitted=fitted,
            residuals=resid,
            whitened_residuals=resid.copy(),
            weights=np.where(valid, 1.0, np.nan),
            scale=float(np.sqrt(ols.residual_var[0])),
            n_used=int(valid.sum()),
            n_iter=0,
            converged=True,
            ar_order_bic=np.zeros(0),
        )
    complete = bool(valid.all())
    # AR-IRLS without gaps: filter the design, no FFT whitener
    fast = complete and method == "ar-irls"
    normal0 = None
    try:
        normal0 = NormalEquations(gram[1:, 1:])
    except np.linalg.LinAlgError:  # ill-conditioned: least squares from the rows
        fast = False
        betas, _ = _solve_joint(rows, gram)
    else:
        betas = normal0.solve(gram[1:, 0])
    # zero on invalid rows, which then add nothing; the design's rows are C-contiguous,
    # the layout in which the many products X δ and X' v of the IRLS steps are fastest
    flow0, xrows = rows[0], rows[1:]
    if method == "ar-irls" and normal0 is not None:
        betas = _robust_start(flow0, xrows, valid, betas, normal0, tukey_c)
    fitted0 = xrows.T @ betas
    whitener = None if fast else Whitener(rows, valid)
    converged = False
    ar = None
    preconditioner = None
    operator = None
    white = None
    previous_change = np.inf
    scale_w = None  # the last round's residual scale (a guess for the next round's MAD)
    inner_tol = max(_FIRST_ROUND_TOL, 0.1 * tol) if method == "ar-irls" else 0.1 * tol
    n_iter = 0
    for step in range(1, max_iter + 1):
        n_iter = step
        resid = flow0 - fitted0 if complete else np.where(valid, flow0 - fitted0, np.nan)
        ar = fit_ar(resid, max_ar_order, order=ar_order, method=ar_estimator)
        kept = whitened_rows(valid, ar.order)
        if kept.sum() <= k:
            raise ChannelFitError(f"too few samples left after AR({ar.order}) whitening")
        if method == "ar-irls":
            if fast:  # whiten the regressors only when a Gram matrix needs them
                operator = FilteredRows(design, ar.coefs, design_rows=xrows)
                start = operator.filter(flow0 - fitted0)
                fit = irls_rows(
                    None, operator, betas, c=tukey_c, tol=inner_tol, normal=preconditioner,
                    residuals=start, scale_guess=scale_w,
                )  # fmt: skip
            else:
                white = whitener.apply(ar.coefs)
                operator = RowsOperator(white[1:])
                fit = irls_rows(
                    white[0], operator, betas, c=tukey_c, tol=inner_tol, normal=preconditioner,
                    scale_guess=scale_w,
                )  # fmt: skip
            preconditioner = fit.normal  # the next round's X'WX differs little
            new, weights_w, scale_w = fit.betas, fit.weights, fit.scale
        else:
            new, normal = _whitened_ols(whitener, ar.coefs)
        new_fitted = xrows.T @ new
        change = np.linalg.norm(new_fitted - fitted0) / max(
            np.linalg.norm(flow0 - new_fitted), 1e-300
        )
        betas, fitted0 = new, new_fitted
        if change < tol and inner_tol <= 0.1 * tol:
            converged = True
            break
        if method == "ar-irls":
            # the rounds contract geometrically: stop when the changes still to come
            # (extrapolated from the last two) add up to under half the tolerance
            ratio = change / previous_change  # 0 after the first round: no stop there
            if 0 < ratio < 0.5 and change * ratio / (1 - ratio) < 0.5 * tol and inner_tol <= tol:
                converged = True
                break
            previous_change = change
            inner_tol = max(0.1 * tol, _ROUND_TOL_SHARE * change)
    design_fft = None
    if method == "ar-irls":
        n_kept = int(kept.sum())
        n_fft = fft.next_fast_len(n_kept, real=True)
        if fast:  # the final filter's rows, in a buffer zero-padded to the FFT length
            xw = operator.materialize(width=n_fft)
            yw = operator.filter(flow0)
            design_fft = fft.rfft(operator.buffer()[:, :n_fft], axis=1)
            # the raw rows are not needed any more (the joint rows are a scratch buffer,
            # kept for the next fit; the references go so nothing reads them by mistake)
            operator.design = operator.design_rows = None
            del rows, xrows, flow0
        else:
            yw, xw = white[0], white[1:]
        # √W X̃ in a buffer zero-padded to the FFT length, for the sandwich's DFT of it
        padded = scratch("weighted_rows", (k, n_fft))
        padded[:, n_kept:] = 0.0
        root_rows = np.multiply(xw, np.sqrt(weights_w), out=padded[:, :n_kept])
        xtwx = root_rows @ root_rows.T
        normal = NormalEquations(xtwx, root_rows)
    else:
        weights_w = np.ones(int(kept.sum()))
    xtwx_inv = normal.inverse()
    if method == "ar-irls" or covariance == "spectral":
        if method != "ar-irls":
            white = whitener.apply(ar.coefs)
            yw, xw = white[0], white[1:]
        ew = yw - xw.T @ betas
    else:  # the whitened residuals alone: filter y - Xβ (one series, not the design)
        ew = whiten(flow0 - fitted0, ar.coefs, valid)
        xw = None
    sum_w = float(weights_w.sum())
    dof = sum_w - k
    if not dof > 0:
        raise ChannelFitError("no residual degrees of freedom left after robust weighting")
    s2 = float(np.sum(weights_w * ew * ew) / dof)
    cov = s2 * xtwx_inv
    spectral = None
    if covariance == "spectral":
        bins = max(
            1, int(round(smoothing_hz * fft.next_fast_len(yw.shape[0], real=True) / sfreq_hz))
        )
        bread, weighted_fft = xtwx_inv, None
        if method == "ar-irls":
            weighted_fft = np.fft.rfft(
                padded, axis=1, out=scratch("weighted_fft", (k, n_fft // 2 + 1), complex)
            )  # DFT(√W X̃); the buffer is free again
            bread = _bisquare_bread(
                xw, ew, scale_w, tukey_c, xtwx_inv, normal.norms, work=padded[:, : xw.shape[1]]
            )
            del padded, root_rows
        spectral = spectral_sandwich(
            xw.T,
            ew,
            weights_w,
            xtwx_inv,
            smoothing_bins=bins,
            bread=bread,
            weighted_fft=weighted_fft,
            design_fft=design_fft if fast else whitener.kept_spectrum(ar.coefs),
        )
        cov = spectral.cov
    fitted = np.where(valid, fitted0, np.nan)
    resid = np.where(valid, flow - fitted0, np.nan)
    white = nan.copy()
    white[kept] = ew
    weights = nan.copy()
    weights[kept] = weights_w
    return ChannelEstimate(
        betas=betas,
        cov=cov,
        dof=dof,
        ar_coefs=ar.coefs,
        fitted=fitted,
        residuals=resid,
        whitened_residuals=white,
        weights=weights,
        scale=float(np.sqrt(s2)),
        n_used=int(kept.sum()),
        n_iter=n_iter,
        converged=converged,
        ar_order_bic=ar.bic,
        spectral=spectral,
        whitened_design=xw,
        whitened_gram=xtwx if method == "ar-irls" else None,
    )


def _bisquare_bread(xw, ew, scale, c, fallback, norms, work=None):
    """``(X̃' diag(ψ'(u)) X̃)^-1`` with ``u = ẽ / s`` and the bisquare ``ψ'`` (Huber sandwich).

    ``xw`` holds the whitened regressors as rows, shape (k, n); ``norms`` (k,) scales
    the columns for the inversion (e.g. the square root of the diagonal of ``X̃'WX̃``);
    ``work`` (k, n), if given, is overwritten with ``X̃ √max(ψ', 0)`` instead of a new array.
    """
    u = ew / scale / c
    dpsi = np.where(np.abs(u) <= 1.0, (1.0 - u * u) * (1.0 - 5.0 * u * u), 0.0)
    # ψ' < 0 for 0.45 c < |u| < c (a few per cent of the rows): X̃'ΨX̃ = A'A - N'N with
    # A = X̃ √ψ'₊ over every row and N = X̃ √(-ψ'₋) over those few, two symmetric products
    scaled = np.multiply(xw, np.sqrt(np.maximum(dpsi, 0.0)), out=work)
    gram = scaled @ scaled.T
    negative = np.flatnonzero(dpsi < 0.0)
    if negative.size:
        rows = xw[:, negative] * np.sqrt(-dpsi[negative])
        gram -= rows @ rows.T
    gram /= np.outer(norms, norms)
    try:
        inv = np.linalg.inv(gram)
    except np.linalg.LinAlgError:
        return fallback
    if not np.all(np.isfinite(inv)) or np.any(np.diag(inv) <= 0):
        return fallback
    return inv / np.outer(norms, norms)


def _masked(design: np.ndarray, betas: np.ndarray, valid: np.ndarray) -> np.ndarray:
    out = np.full(design.shape[0], np.nan)
    out[valid] = design[valid] @ betas
    return out
