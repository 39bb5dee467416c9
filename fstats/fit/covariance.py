"""Coefficient covariance that stays honest when whitening leaves slow correlation behind.

An AR(p) model with p up to a few seconds of lags whitens the cardiac pulse, the
respiration and the measurement noise well, but it cannot resolve the spectrum of
1/f-like cerebral fluctuations near a block design's frequency (about 0.01 Hz):
the whitened residuals keep excess power exactly where the task regressor lives,
and the usual ``s² (X̃'WX̃)^-1`` is then too small.  The estimator here is a
frequency-domain sandwich on the prewhitened, robustly weighted regression:

``cov(β̂) = B [Σ_f V(f)^H V(f) Ŝ(f)] B``, with ``B = (X̃'WX̃)^-1`` applied through
``V = DFT(X̃ B)`` and ``Ŝ(f)`` the smoothed periodogram of the influence series
``ψ_t = w_t ẽ_t`` (bisquare weight times whitened residual).

The residual periodogram is depleted at the frequencies the design fits (the
residuals are orthogonal to the regressors); each smoothed ordinate is divided by
its expected share under white noise, ``Σ K (1 - d)`` with ``d(f) = Σ_k |Q_k(f)|²``
the Fourier-domain leverage of an orthonormal basis ``Q`` of ``√W X̃``.  The degrees
of freedom of each variance come from Satterthwaite's approximation, with the
periodogram ordinates treated as independent scaled χ²₂ variables, so a block
contrast whose information sits in a handful of low-frequency bins gets few
degrees of freedom, and an event contrast with broadband information gets many.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import fft
from scipy.linalg import blas

__all__ = ["SpectralCovariance", "spectral_sandwich", "sandwich_cov_rows", "satterthwaite_dof"]

#: Frequency ordinates (real and imaginary parts counted apart) per block of the
#: leverage and meat products: their temporaries stay small instead of design-sized.
_CHUNK = 4096


@dataclass(frozen=True, eq=False)
class SpectralCovariance:
    """Frequency-domain sandwich covariance and what is needed for per-contrast df.

    Parameters
    ----------
    cov : ndarray, shape (k, k)
        Coefficient covariance (flow unit squared per regressor unit squared).
    spectrum : ndarray, shape (k, n_freqs), complex
        ``DFT(X̃)`` of each regressor on the one-sided frequency grid (possibly times a
        common unit-modulus factor per frequency, which nothing here depends on).
    side_scale : ndarray, shape (n_freqs,)
        The one-sided weights' square root ``√(side / n_fft)``.
    bread : ndarray, shape (k, k_out)
        The sandwich's bread ``B`` (its first ``k_out`` columns).
    noise_spectrum : ndarray, shape (n_freqs,)
        Leverage-adjusted smoothed periodogram ``Ŝ(f)`` of the influence series.
    raw_periodogram : ndarray, shape (n_freqs,)
        Periodogram of the influence series.
    adjust : ndarray, shape (n_freqs,)
        ``1 - d(f)``, the expected share of white-noise power left in the residuals.
    denominator : ndarray, shape (n_freqs,)
        Smoothed ``1 - d(f)`` (floored at 0.1 per bin), the divisor of ``Ŝ(f)``.
    smoothing_bins : int
        Half-width of the Daniell smoother, in frequency bins.
    bin_ratio : float
        ``n / n_fft``: the series is zero-padded to a fast FFT length, so neighbouring
        ordinates are slightly correlated; degrees of freedom are scaled by this ratio.
    """

    cov: np.ndarray
    spectrum: np.ndarray
    side_scale: np.ndarray
    bread: np.ndarray
    noise_spectrum: np.ndarray
    raw_periodogram: np.ndarray
    adjust: np.ndarray
    denominator: np.ndarray
    smoothing_bins: int
    bin_ratio: float = 1.0

    @property
    def basis(self) -> np.ndarray:
        """``DFT(X̃)`` times the one-sided weights' square root, shape (k, n_freqs)."""
        return self.spectrum * self.side_scale

    @property
    def design_spectrum(self) -> np.ndarray:
        """``DFT(X̃ B)`` times the one-sided weights' square root, shape (n_freqs, k_out)."""
        return self.basis.T @ self.bread

    def contrast_power(self, weights: np.ndarray) -> np.ndarray:
        """``|DFT(X̃ B c)|²`` (one-sided weights included) for contrast rows, shape (n_freqs, q)."""
        combos = self.bread @ np.atleast_2d(np.asarray(weights, dtype=float)).T  # (k, q)
        values = combos.T @ _real_view(self.spectrum)  # (q, 2 n_freqs): re, im interleaved
        values = values.reshape(values.shape[0], -1, 2)
        return np.einsum("qfc,qfc->fq", values, values) * (self.side_scale**2)[:, None]

    def contrast_dof(self, weights: np.ndarray) -> float | np.ndarray:
        """Satterthwaite df of ``c'β̂``: ``weights`` shape (k,) → float, (q, k) → (q,)."""
        return satterthwaite_dof(self, weights)


def _real_view(values: np.ndarray) -> np.ndarray:
    """A complex (k, m) array as real (k, 2m), real and imaginary parts interleaved."""
    values = np.ascontiguousarray(values)
    return values.view(np.float64)


def _daniell(values: np.ndarray, half_width: int) -> np.ndarray:
    """Running sum over ±half_width bins along axis 0, reflecting at both ends."""
    if half_width == 0:
        return np.array(values, dtype=float, copy=True)
    m = min(half_width, values.shape[0] - 1)
    padded = np.concatenate([values[m:0:-1], values, values[-2 : -m - 2 : -1]], axis=0)
    csum = np.cumsum(padded, axis=0)
    csum = np.concatenate([np.zeros((1,) + values.shape[1:]), csum], axis=0)
    out = csum[2 * m + 1 :] - csum[: -2 * m - 1]
    if m < half_width:  # very short series: scale to the nominal window length
        out = out * (2 * half_width + 1) / (2 * m + 1)
    return out


def _leverage(gw: np.ndarray, xtwx_inv: np.ndarray) -> np.ndarray:
    """``Re(G_f B G_f^H)`` for every frequency f, ``G`` (k, n_freqs) complex, ``B`` SPD (k, k).

    With ``B = L L'`` (Cholesky of the diagonally scaled ``B``) this is ``‖L' G_f‖²``,
    one triangular product and a sum of squares instead of ``B G`` and an elementwise
    product; falls back to the direct form when ``B`` is not numerically positive definite.
    """
    values = _real_view(gw)  # (k, 2 n_freqs): Re and Im interleaved
    scale = np.sqrt(np.clip(np.diag(xtwx_inv), 0.0, None))
    if np.all(scale > 0):
        try:
            lower = np.linalg.cholesky(xtwx_inv / np.outer(scale, scale))
        except np.linalg.LinAlgError:
            pass
        else:
            factor = np.asfortranarray(lower * scale[:, None])  # D L, lower triangular
            quad = np.empty(values.shape[1])
            for start in range(0, values.shape[1], _CHUNK):  # small temporaries
                part = values[:, start : start + _CHUNK]
                # (L'D G)' = G' D L: the transposed rows are Fortran-ordered, so no copy
                root = blas.dtrmm(1.0, factor, part.T, side=1, lower=1, overwrite_b=0)
                root *= root
                quad[start : start + _CHUNK] = root.sum(axis=1)
            return quad[0::2] + quad[1::2]
    quad = np.einsum("kf,kf->f", values, xtwx_inv @ values)
    return quad[0::2] + quad[1::2]


def _noise_and_meat(g, gw, periodogram, xtwx_inv, n, side_weight, smoothing_bins):
    """The sandwich's noise spectrum and meat from the design's spectra (shared core).

    Returns ``adjust = 1 - d`` (leverage ``d`` from ``gw``), the smoothed divisor, the
    leverage-adjusted smoothed periodogram ``Ŝ`` and ``meat = Re Σ_f side_f Ŝ_f G_f^H G_f``
    (``side_weight`` = one-sided weight / n_fft), the meat built in frequency blocks.
    """
    leverage = _leverage(gw, xtwx_inv) / n
    adjust = np.clip(1.0 - leverage, 0.0, 1.0)
    denom = np.maximum(_daniell(adjust, smoothing_bins), 0.1 * (2 * smoothing_bins + 1))
    noise = _daniell(periodogram, smoothing_bins) / denom
    root_noise = np.repeat(np.sqrt(side_weight * noise), 2)
    spectrum = _real_view(g)
    meat = np.zeros((g.shape[0], g.shape[0]))  # Re(Σ_f V^H V Ŝ): Re·Re + Im·Im
    for start in range(0, spectrum.shape[1], _CHUNK):  # small temporaries
        scaled = spectrum[:, start : start + _CHUNK] * root_noise[start : start + _CHUNK]
        meat += scaled @ scaled.T
    return adjust, denom, noise, meat


def spectral_sandwich(
    design: np.ndarray,
    residuals: np.ndarray,
    weights: np.ndarray,
    xtwx_inv: np.ndarray,
    *,
    smoothing_bins: int,
    columns: int | None = None,
    bread: np.ndarray | None = None,
    weighted_design: np.ndarray | None = None,
    design_fft: np.ndarray | None = None,
    weighted_fft: np.ndarray | None = None,
) -> SpectralCovariance:
    """Frequency-domain sandwich covariance of a (prewhitened, weighted) regression.

    Parameters
    ----------
    design : ndarray, shape (n, k)
        Prewhitened regressors ``X̃`` (rows in time order; gaps are closed up).
    residuals : ndarray, shape (n,)
        Prewhitened residuals ``ẽ`` (flow unit).
    weights : ndarray, shape (n,)
        Robust weights ``w`` in [0, 1] (ones without robust weighting).
    xtwx_inv : ndarray, shape (k, k)
        ``(X̃'WX̃)^-1``.
    smoothing_bins : int
        Half-width ``M`` of the Daniell periodogram smoother, in bins of ``1/n`` cycles per sample.
    columns : int, optional
        Only the covariance of the first ``columns`` coefficients (cheaper for wide designs).
    bread : ndarray, shape (k, k), optional
        The sandwich's bread ``B`` (default ``xtwx_inv``); for an M-estimator
        ``(X̃' diag(ψ') X̃)^-1``.  ``xtwx_inv`` is still used for the leverage.
    weighted_design : ndarray, shape (n, k), optional
        ``√W X̃`` if the caller has it already (saves forming it again).
    design_fft : ndarray, shape (k, n_fft // 2 + 1), complex, optional
        ``DFT(X̃)`` on the grid ``n_fft = next_fast_len(n)`` if the caller has it (saves
        the forward FFT of the design).  It may carry a common unit-modulus factor per
        frequency (a time shift of every series), to which the sandwich is invariant.
    weighted_fft : ndarray, shape (k, n_fft // 2 + 1), complex, optional
        ``DFT(√W X̃)`` on the same grid if the caller has it (then ``weighted_design``
        is not needed).

    Returns
    -------
    SpectralCovariance

    Notes
    -----
    With ``v_t = (X̃ B)_t`` and ``ψ_t = w_t ẽ_t``, ``c'(β̂ - β) ≈ Σ_t (v_t·c) ψ_t``, so
    ``var(c'β̂) = Σ_f |V_c(f)|² S_ψ(f) / n`` for a stationary ``ψ`` (two-sided sum over
    the DFT grid).  ``Ŝ_ψ(f_j) = Σ_{|i-j|≤M} I_i / Σ_{|i-j|≤M} (1 - d_i)`` with
    ``I_i = |Ψ(f_i)|² / n`` and the leverage ``d_i = G_i B G_i^H / n``, ``G = DFT(√W X̃)``
    (the diagonal of the weighted hat matrix in the Fourier basis).  Under white noise
    this reduces, in expectation, to the Huber sandwich ``B X̃'W²X̃ B σ²``.
    """
    n, k = design.shape
    n_fft = fft.next_fast_len(n, real=True)
    psi = weights * residuals
    side = np.full(n_fft // 2 + 1, 2.0)
    side[0] = 1.0
    if n_fft % 2 == 0:
        side[-1] = 1.0
    rows = None
    if design_fft is None or (weighted_design is None and weighted_fft is None):
        rows = design.T  # (k, n): the FFTs along contiguous rows are the fast ones
        if rows.strides[1] != rows.itemsize:
            rows = np.ascontiguousarray(rows)
    g = fft.rfft(rows, n=n_fft, axis=1) if design_fft is None else design_fft
    if weighted_fft is not None:
        gw = weighted_fft
    elif weighted_design is not None:
        gw = fft.rfft(weighted_design.T, n=n_fft, axis=1)
    elif np.all(weights == 1.0):
        gw = g
    else:
        gw = fft.rfft(rows * np.sqrt(weights), n=n_fft, axis=1)
    bread = xtwx_inv if bread is None else bread
    b = bread if columns is None else bread[:, :columns]
    periodogram = np.abs(fft.rfft(psi, n=n_fft)) ** 2 / n
    adjust, denom, noise, meat = _noise_and_meat(
        g, gw, periodogram, xtwx_inv, n, side / n_fft, smoothing_bins
    )
    side_scale = np.sqrt(side / n_fft)
    cov = b.T @ meat @ b
    cov = 0.5 * (cov + cov.T)
    return SpectralCovariance(
        cov=cov,
        spectrum=g,
        side_scale=side_scale,
        bread=b,
        noise_spectrum=noise,
        raw_periodogram=periodogram,
        adjust=adjust,
        denominator=denom,
        smoothing_bins=smoothing_bins,
        bin_ratio=n / n_fft,
    )


def sandwich_cov_rows(
    rows: np.ndarray,
    weighted_rows: np.ndarray | None,
    psi: np.ndarray,
    xtwx_inv: np.ndarray,
    *,
    smoothing_bins: int,
    n_samples: int | None = None,
) -> np.ndarray:
    """``spectral_sandwich(rows.T, ...).cov``, from rows, with nothing else computed.

    The same formula with the regressors one per row (the layout the FFTs along time
    want), for callers that need only the covariance (the block amplitudes of
    :mod:`fstats.fit.block_spread`).

    Parameters
    ----------
    rows : ndarray, shape (k, m)
        Prewhitened regressors ``X̃'``, C-contiguous; ``m`` may exceed ``n_samples``
        (zero padding up to the FFT length, which then saves a copy).
    weighted_rows : ndarray, shape (k, m) or None
        ``(√W X̃)'`` (None: unit weights, the same as ``rows``).
    psi : ndarray, shape (n_samples,)
        Influence series ``w ẽ`` (flow unit).
    xtwx_inv : ndarray, shape (k, k)
        ``(X̃'WX̃)^-1``, also the bread.
    smoothing_bins : int
        Half-width of the Daniell smoother, in frequency bins.
    n_samples : int, optional
        Number of samples (default ``m``).

    Returns
    -------
    ndarray, shape (k, k)
    """
    n = rows.shape[1] if n_samples is None else int(n_samples)
    n_fft = fft.next_fast_len(n, real=True)

    def spectrum(values: np.ndarray) -> np.ndarray:
        # numpy's FFT: the same transform as scipy's to the last bit here (both are
        # pocketfft), a little faster for many rows of a fast length
        if values.shape[-1] == n_fft:
            return np.fft.rfft(values, axis=-1)
        return np.fft.rfft(values[..., :n], n=n_fft, axis=-1)

    g = spectrum(rows)
    gw = g if weighted_rows is None else spectrum(weighted_rows)
    periodogram = np.abs(spectrum(psi)) ** 2 / n
    side = np.full(periodogram.size, 2.0)
    side[0] = 1.0
    if n_fft % 2 == 0:
        side[-1] = 1.0
    meat = _noise_and_meat(g, gw, periodogram, xtwx_inv, n, side / n_fft, smoothing_bins)[3]
    cov = xtwx_inv.T @ meat @ xtwx_inv
    return 0.5 * (cov + cov.T)


def satterthwaite_dof(spectral: SpectralCovariance, contrast: np.ndarray) -> np.ndarray | float:
    """Satterthwaite degrees of freedom of the variance of contrasts.

    Parameters
    ----------
    spectral : SpectralCovariance
    contrast : ndarray, shape (k,) or (q, k)
        Contrast weights (one row per contrast).

    Returns
    -------
    float or ndarray, shape (q,)
        ``2 (Σ_i a_i E I_i)² / Σ_i (a_i E I_i)²`` where the variance estimate is
        ``Σ_i a_i I_i`` (``a_i`` from the smoother and ``|V_c|²``), ``E I_i`` is
        approximated by ``Ŝ_i (1 - d_i)``, and each ordinate counts as χ²₂/2.
    """
    c = np.asarray(contrast, dtype=float)
    power = spectral.contrast_power(c)
    a = _daniell(power / spectral.denominator[:, None], spectral.smoothing_bins)
    terms = a * (spectral.noise_spectrum * spectral.adjust)[:, None]
    total = terms.sum(axis=0)
    with np.errstate(invalid="ignore", divide="ignore"):
        dof = np.where(
            total > 0, spectral.bin_ratio * 2.0 * total**2 / np.sum(terms**2, axis=0), np.nan
        )
    return float(dof[0]) if c.ndim == 1 else dof
