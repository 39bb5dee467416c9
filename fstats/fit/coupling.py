"""How much the short-channel coupling depends on frequency, and the variance that adds.

A short-channel regressor removes scalp flow from a long channel with *one*
coefficient, fitted on every frequency at once.  That is right when the long
channel's part that follows the short channel is a scaled copy of scalp flow.  It
is not when the cortex under the long channel carries the same systemic signals
with its own gain and delay (the cardiac pulse reaches the cortex; slow systemic
oscillations arrive there seconds later): the fitted coefficient is then a mix of
the scalp weight and the cortical share, and the mix differs from band to band.
A task-locked scalp change (a skin response to arousal, say) is removed with that
mixed coefficient, and the error it leaves lies along the task regressor, where no
residual diagnostic can see it.

This module measures the frequency dependence and turns it into variance:

1. the flow and the short column are both residualised on every other design
   column (weighted by the fit's robust weights);
2. their coupling is estimated separately in frequency bands
   (:data:`BAND_EDGES_HZ`: slow/task band, low-frequency oscillations, Mayer
   waves, respiration, cardiac fundamental, cardiac harmonics), each with its
   sampling variance;
3. the between-band variance τ² of the couplings is the DerSimonian–Laird moment
   estimate (DerSimonian & Laird 1986), i.e. the spread beyond what sampling
   noise explains (τ² = 0 when the coupling is the same in every band);
4. the coupling that applies to a task-locked scalp change is taken to be the
   fitted one ± τ, which adds ``τ² γ γ'`` to the covariance of the other
   coefficients, γ being the sensitivity of each coefficient to the short
   coefficient (the regression of the short column on the other columns).  The
   term has ``K - 1`` degrees of freedom (K bands) and is combined with the main
   covariance by Satterthwaite's approximation.

The term is large only where the short channel itself follows the task (γ large)
*and* the coupling is frequency dependent; elsewhere it is negligible.  It widens
intervals; it does not remove the bias of the fitted coupling.  The idea of
treating the band couplings as a random-effects sample is this package's own
(see ``notes`` in DEVELOPERS.md); DerSimonian–Laird and Satterthwaite are the
published formulas it uses.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import fft

from fstats.fit.components import VarianceComponent

__all__ = [
    "BAND_EDGES_HZ",
    "MIN_BINS",
    "CouplingSpread",
    "band_couplings",
    "between_band_variance",
    "coupling_spread",
]

#: Edges of the coupling bands, Hz (the last band runs to the Nyquist frequency):
#: slow/task band, low-frequency oscillations, Mayer waves, respiration, cardiac
#: fundamental, cardiac harmonics (physiological bands, common practice).
BAND_EDGES_HZ: tuple[float, ...] = (0.005, 0.02, 0.05, 0.15, 0.5, 1.5)

#: Fewest Fourier frequencies a band needs to enter the estimate.
MIN_BINS: int = 8


@dataclass(frozen=True, eq=False)
class CouplingSpread:
    """Band couplings of one short column and the variance they imply.

    Parameters
    ----------
    column : int
        Index of the short column in the design.
    band_edges_hz : ndarray, shape (K + 1,)
        Edges of the bands used, Hz.
    couplings : ndarray, shape (K,)
        Coupling (flow unit per regressor unit) estimated in each band.
    variances : ndarray, shape (K,)
        Sampling variance of each band coupling.
    q : float
        Cochran's heterogeneity statistic of the couplings (≈ K - 1 without
        frequency dependence).
    tau2 : float
        DerSimonian–Laird between-band variance of the coupling, (flow unit per
        regressor unit)².
    sensitivity : ndarray, shape (k,)
        Change of every coefficient per unit change of the short coefficient
        (0 for the short column itself).
    dof : float
        Degrees of freedom of ``tau2`` (K - 1).
    """

    column: int
    band_edges_hz: np.ndarray
    couplings: np.ndarray
    variances: np.ndarray
    q: float
    tau2: float
    sensitivity: np.ndarray
    dof: float

    def component(self, name: str) -> VarianceComponent:
        """The variance component ``tau2 · s s'`` this spread adds."""
        return VarianceComponent(name, self.sensitivity, self.tau2, self.dof)


def band_couplings(
    y: np.ndarray,
    x: np.ndarray,
    sfreq_hz: float,
    band_edges_hz: tuple[float, ...] = BAND_EDGES_HZ,
    *,
    min_bins: int = MIN_BINS,
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Coupling of ``y`` to ``x`` in frequency bands, with sampling variances.

    In each band the coupling is the least-squares gain over the band's Fourier
    frequencies, ``h = Σ Re(Y X*) / Σ |X|²``.  Its variance is the
    heteroscedasticity-consistent (sandwich) form
    ``Σ |X|² |R|² / (2 (Σ|X|²)²) · 2m / (2m - 1)`` with ``R = Y - hX`` over the
    band's ``m`` frequencies (a real gain fitted to complex Fourier coefficients;
    the noise need not be flat within the band, which 1/f physiology is not).

    Parameters
    ----------
    y, x : ndarray, shape (n,)
        Evenly sampled series (already residualised on the other regressors).
    sfreq_hz : float
        Sampling rate, Hz.
    band_edges_hz : tuple of float
        Band edges, Hz; a last band runs from the last edge to the Nyquist frequency.
    min_bins : int
        Bands with fewer frequencies (or no power in ``x``) are dropped.

    Returns
    -------
    couplings, variances : ndarray, shape (K,)
    edges : ndarray, shape (K, 2)
        Lower and upper edge of each kept band, Hz.
    """
    y = np.asarray(y, dtype=float)
    spectra = _pair_spectra(np.stack([y, np.asarray(x, dtype=float)]))
    return _band_couplings(spectra, y.size, sfreq_hz, band_edges_hz, min_bins)


def _pair_spectra(rows: np.ndarray) -> np.ndarray:
    """One-sided DFTs of two real series (rows, shape (2, n)) by one complex FFT.

    ``Z = DFT(a/s_a + i b/s_b)`` gives ``A_f = s_a (Z_f + Z*_{-f}) / 2`` and
    ``B_f = s_b (Z_f - Z*_{-f}) / 2i``; the scales are powers of two near each row's
    largest value (exact), so neither series drowns in the other's rounding.  One
    complex FFT costs what two real ones do at fast lengths, and half at lengths with
    a large prime factor (a gap-closed series' length is whatever it is).
    """
    n = rows.shape[1]
    peak = np.max(np.abs(rows), axis=1)
    scale = np.exp2(np.round(np.log2(np.where(peak > 0, peak, 1.0))))
    packed = np.empty(n, dtype=complex)
    packed.real = rows[0] / scale[0]
    packed.imag = rows[1] / scale[1]
    z = fft.fft(packed)
    m = n // 2 + 1
    mirror = np.empty(m, dtype=complex)  # Z*_{-f} for f = 0..m-1
    mirror[0] = z[0]
    mirror[1:] = z[n - 1 : n - m : -1]
    np.conjugate(mirror, out=mirror)
    head = z[:m]
    return np.stack([(head + mirror) * (0.5 * scale[0]), (head - mirror) * (-0.5j * scale[1])])


def _band_couplings(
    spectra: np.ndarray, n: int, sfreq_hz: float, band_edges_hz: tuple[float, ...], min_bins: int
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """:func:`band_couplings` from the spectra of ``y`` and ``x`` (rows, ``n`` samples)."""
    freqs = np.fft.rfftfreq(n, 1.0 / sfreq_hz)
    ys, xs = spectra
    power = xs.real**2 + xs.imag**2  # |X|²
    cross = ys.real * xs.real + ys.imag * xs.imag  # Re(Y X*)
    nyquist = sfreq_hz / 2.0
    lows = [e for e in band_edges_hz if e < nyquist]
    highs = [*lows[1:], nyquist + 1e-9]
    # freqs ascend: a band [low, high) without 0 Hz is one index range
    starts = np.maximum(np.searchsorted(freqs, lows, side="left"), 1)
    stops = np.searchsorted(freqs, highs, side="left")
    out_h, out_v, out_e = [], [], []
    for low, high, a, z in zip(lows, highs, starts, stops, strict=True):
        m = max(0, int(z - a))
        total = float(np.sum(power[a:z])) if m else 0.0
        if m < min_bins or total <= 0:
            continue
        h = float(np.sum(cross[a:z]) / total)
        miss = ys[a:z] - h * xs[a:z]
        spread = float(np.sum(power[a:z] * (miss.real**2 + miss.imag**2)))
        out_h.append(h)
        out_v.append(spread / (2.0 * total**2) * (2 * m) / (2 * m - 1))
        out_e.append((low, min(high, nyquist)))
    return np.array(out_h), np.array(out_v), np.array(out_e).reshape(-1, 2)


def between_band_variance(couplings: np.ndarray, variances: np.ndarray) -> tuple[float, float]:
    """DerSimonian–Laird between-band variance of the couplings.

    ``w = 1/v``, ``Q = Σ w (h - h̄_w)²``, ``τ² = max(0, (Q - (K-1)) / (Σw - Σw²/Σw))``
    (DerSimonian & Laird 1986).

    Returns
    -------
    tau2, q : float
        NaN when fewer than two bands are given.
    """
    h = np.asarray(couplings, dtype=float)
    v = np.asarray(variances, dtype=float)
    if h.size < 2 or np.any(~np.isfinite(v)) or np.any(v <= 0):
        return np.nan, np.nan
    w = 1.0 / v
    mean = np.sum(w * h) / np.sum(w)
    q = float(np.sum(w * (h - mean) ** 2))
    denom = np.sum(w) - np.sum(w**2) / np.sum(w)
    return float(max(0.0, (q - (h.size - 1)) / denom)), q


def coupling_spread(
    flow: np.ndarray,
    design: np.ndarray,
    short_columns: list[int] | tuple[int, ...],
    weights: np.ndarray,
    sfreq_hz: float,
    *,
    band_edges_hz: tuple[float, ...] = BAND_EDGES_HZ,
    min_bands: int = 3,
) -> tuple[CouplingSpread, ...]:
    """Frequency dependence of each short column's coupling to the flow.

    Parameters
    ----------
    flow : ndarray, shape (n,)
        Flow of one long channel (NaN where missing).
    design : ndarray, shape (n, k)
        The fitted design.
    short_columns : sequence of int
        Indices of the short-channel columns.
    weights : ndarray, shape (n,)
        Robust weights of the fit (1 = full weight; NaN or 0 = not used).
    sfreq_hz : float
        Sampling rate, Hz.
    band_edges_hz : tuple of float
        See :func:`band_couplings`.
    min_bands : int
        Fewer usable bands than this give no spread for that column.

    Returns
    -------
    tuple of CouplingSpread
        One per short column with enough bands (missing samples are skipped; the
        spectrum of the remaining samples is used as if contiguous).
    """
    y = np.asarray(flow, dtype=float)
    x = np.asarray(design, dtype=float)
    w = np.asarray(weights, dtype=float)
    k = x.shape[1]
    with np.errstate(invalid="ignore"):
        ok = np.isfinite(y) & np.isfinite(w) & (w > 0)
    # rows not used keep their place with weight 0 (no copy of the design), and the
    # residual series drop them before the FFT; the Gram matrix comes out finite
    # exactly when the design is finite everywhere, else those rows are dropped first
    root = np.sqrt(np.where(ok, w, 0.0))
    xw = x * root[:, None]
    gram = xw.T @ xw
    gaps = None if ok.all() else ok
    if not np.all(np.isfinite(gram)):
        ok &= np.isfinite(x).all(axis=1)
        root, gaps = np.sqrt(w[ok]), None
        xw = x[ok]
        xw *= root[:, None]
        gram = xw.T @ xw
        yw = y[ok] * root
    else:
        yw = np.where(ok, y, 0.0) * root
    cross = xw.T @ yw
    out = []
    for j in short_columns:
        others = np.delete(np.arange(k), j)
        rhs = np.column_stack([cross[others], gram[others, j]])
        # normal equations (the design is small and the columns are scaled); lstsq on
        # the Gram falls back gracefully when it is singular
        coef = np.linalg.lstsq(gram[np.ix_(others, others)], rhs, rcond=None)[0]
        # residuals of the flow and of the short column on the others, as two rows:
        # row 0 is the others' fit of the flow, row 1 the short column minus theirs
        combos = np.zeros((2, k))
        combos[0, others] = coef[:, 0]
        combos[1, others] = -coef[:, 1]
        combos[1, j] = 1.0
        series = combos @ xw.T
        np.subtract(yw, series[0], out=series[0])
        if gaps is not None:
            series = np.compress(gaps, series, axis=1)
        h, v, edges = _band_couplings(
            _pair_spectra(series), series.shape[1], sfreq_hz, band_edges_hz, MIN_BINS
        )
        if h.size < min_bands:
            continue
        tau2, q = between_band_variance(h, v)
        if not np.isfinite(tau2):
            continue
        sensitivity = np.zeros(k)
        sensitivity[others] = -coef[:, 1]
        out.append(
            CouplingSpread(
                column=int(j),
                band_edges_hz=np.append(edges[:, 0], edges[-1, 1]),
                couplings=h,
                variances=v,
                q=q,
                tau2=tau2,
                sensitivity=sensitivity,
                dof=float(h.size - 1),
            )
        )
    return tuple(out)
