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

__all__ = ["SpectralCovariance", "spectral_sandwich", "satterthwaite_dof"]


@dataclass(frozen=True, eq=False)
class SpectralCovariance:
    """Frequency-domain sandwich covariance and what is needed for per-contrast df.

    Parameters
    ----------
    cov : ndarray, shape (k, k)
        Coefficient covariance (flow unit squared per regressor unit squared).
    design_spectrum : ndarray, shape (n_freqs, k), complex
        ``DFT(X̃ B)`` on the one-sided frequency grid, times the one-sided weights' square root.
    noise_spectrum : ndarray, shape (n_freqs,)
        Leverage-adjusted smoothed periodogram ``Ŝ(f)`` of the influence series.
    raw_periodogram : ndarray, shape (n_freqs,)
        Periodogram of the influence series.
    adjust : ndarray, shape (n_freqs,)
        ``1 - d(f)``, the expected share of white-noise power left in the residuals.
    smoothing_bins : int
        Half-width of the Daniell smoother, in frequency bins.
    """

    cov: np.ndarray
    design_spectrum: np.ndarray
    noise_spectrum: np.ndarray
    raw_periodogram: np.ndarray
    adjust: np.ndarray
    smoothing_bins: int

    def contrast_dof(self, weights: np.ndarray) -> float:
        """Satterthwaite degrees of freedom of ``c'β̂`` for one contrast row ``c`` (shape (k,))."""
        return satterthwaite_dof(self, weights)


def _daniell(values: np.ndarray, half_width: int) -> np.ndarray:
    """Running sum over ±half_width bins, reflecting at the ends (one-sided spectrum)."""
    if half_width == 0:
        return values.copy()
    padded = np.concatenate([values[half_width:0:-1], values, values[-2 : -half_width - 2 : -1]])
    kernel = np.ones(2 * half_width + 1)
    return np.convolve(padded, kernel, mode="valid")


def spectral_sandwich(
    design: np.ndarray,
    residuals: np.ndarray,
    weights: np.ndarray,
    xtwx_inv: np.ndarray,
    *,
    smoothing_bins: int,
    columns: int | None = None,
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

    Returns
    -------
    SpectralCovariance

    Notes
    -----
    With ``v_t = (X̃ B)_t`` and ``ψ_t = w_t ẽ_t``, ``c'(β̂ - β) ≈ Σ_t (v_t·c) ψ_t``, so
    ``var(c'β̂) = Σ_f |V_c(f)|² S_ψ(f) / n`` for a stationary ``ψ`` (two-sided sum over
    the DFT grid).  ``Ŝ_ψ(f_j) = Σ_{|i-j|≤M} I_i / Σ_{|i-j|≤M} (1 - d_i)`` with
    ``I_i = |Ψ(f_i)|² / n`` and the leverage ``d_i`` as in the module notes.  Under
    white noise this reduces, in expectation, to the Huber sandwich
    ``B X̃'W²X̃ B σ²``.
    """
    n, k = design.shape
    psi = weights * residuals
    v = design @ (xtwx_inv if columns is None else xtwx_inv[:, :columns])
    n_fft = n
    side = np.full(n_fft // 2 + 1, 2.0)
    side[0] = 1.0
    if n_fft % 2 == 0:
        side[-1] = 1.0
    spec_v = fft.rfft(v, n=n_fft, axis=0) * np.sqrt(side / n)[:, None]
    periodogram = np.abs(fft.rfft(psi, n=n_fft)) ** 2 / n
    q, _ = np.linalg.qr(design * np.sqrt(weights)[:, None], mode="reduced")
    leverage = np.sum(np.abs(fft.rfft(q, n=n_fft, axis=0)) ** 2, axis=1) / n
    adjust = np.clip(1.0 - leverage, 0.0, 1.0)
    numer = _daniell(periodogram, smoothing_bins)
    denom = _daniell(adjust, smoothing_bins)
    floor = 0.1 * (2 * smoothing_bins + 1)
    noise = numer / np.maximum(denom, floor)
    weighted = spec_v * noise[:, None]
    cov = np.real(spec_v.conj().T @ weighted)
    cov = 0.5 * (cov + cov.T)
    return SpectralCovariance(
        cov=cov,
        design_spectrum=spec_v,
        noise_spectrum=noise,
        raw_periodogram=periodogram,
        adjust=adjust,
        smoothing_bins=smoothing_bins,
    )


def satterthwaite_dof(spectral: SpectralCovariance, contrast: np.ndarray) -> float:
    """Satterthwaite degrees of freedom of the variance of one contrast.

    Parameters
    ----------
    spectral : SpectralCovariance
    contrast : ndarray, shape (k,)
        Contrast weights.

    Returns
    -------
    float
        ``2 (Σ_i a_i E I_i)² / Σ_i (a_i E I_i)²`` where the variance estimate is
        ``Σ_i a_i I_i`` (``a_i`` from the smoother and ``|V_c|²``), ``E I_i`` is
        approximated by ``Ŝ_i (1 - d_i)``, and each ordinate counts as χ²₂/2
        (the zero-frequency and Nyquist ordinates as χ²₁).
    """
    m = spectral.smoothing_bins
    power = np.abs(spectral.design_spectrum @ np.asarray(contrast, dtype=float)) ** 2
    floor = 0.1 * (2 * m + 1)
    denom = np.maximum(_daniell(spectral.adjust, m), floor)
    # variance estimate = Σ_j power_j Σ_{|i-j|≤M} I_i / denom_j = Σ_i I_i a_i
    a = _daniell(power / denom, m)
    expected = spectral.noise_spectrum * spectral.adjust
    terms = a * expected
    total = terms.sum()
    if not total > 0:
        return np.nan
    return float(2.0 * total**2 / np.sum(terms**2))
