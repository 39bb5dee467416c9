"""Repeated AR prewhitening of the same series by FFT, for fits with missing samples.

The AR-IRLS fit of a recording with gaps re-whitens the same series with a new filter
in every round.  :class:`Whitener` computes the series' FFT once; each round then
costs one multiplication by the filter's transfer function and one inverse FFT, and
the whitened Gram matrix can be had from the spectrum alone (Parseval).  Rows that
need a missing or a pre-record sample are dropped, as in
:func:`fstats.fit.autoregressive.whiten`.  Gap-free AR-IRLS fits whiten by FIR
products instead (:mod:`fstats.fit.filtering`).
"""

from __future__ import annotations

import numpy as np
from scipy import fft as _fft

from fstats.fit.autoregressive import whitened_rows

__all__ = ["Whitener"]


class Whitener:
    """Repeated AR prewhitening of the same series with changing filters.

    The series' FFT is computed once; each :meth:`apply` multiplies by the filter's
    transfer function and transforms back, so an AR-IRLS loop pays one inverse FFT
    per AR update instead of a convolution.  Rows that need a missing or a
    pre-record sample are dropped, as in :func:`whiten`.  The series are stored one
    per row (time along the last axis), the layout in which the FFTs are fastest.

    Parameters
    ----------
    rows : ndarray, shape (n_series, n_times)
        Series to whiten, one per row (samples where ``valid`` is False are ignored).
    valid : ndarray of bool, shape (n_times,)
        Samples with data.
    """

    def __init__(self, rows: np.ndarray, valid: np.ndarray) -> None:
        self.valid = np.asarray(valid, dtype=bool)
        self.complete = bool(self.valid.all())
        x = rows if self.complete else np.where(self.valid, rows, 0.0)
        self.rows = x
        self.n_times = x.shape[1]
        self.n_fft = _fft.next_fast_len(self.n_times, real=True)
        self.spectrum = _fft.rfft(x, n=self.n_fft, axis=1)
        side = np.full(self.spectrum.shape[1], 2.0)
        side[0] = 1.0
        if self.n_fft % 2 == 0:
            side[-1] = 1.0
        self._side = side / self.n_fft

    def kept(self, order: int) -> np.ndarray:
        """Samples that survive whitening with an AR(order) filter (see :func:`whitened_rows`)."""
        return whitened_rows(self.valid, order)

    def apply(self, coefs: np.ndarray) -> np.ndarray:
        """Whitened samples for AR coefficients ``coefs`` (shape (p,)), shape (n_series, n_kept).

        Circular wrap-around only touches the first p samples, which are dropped.  Without
        gaps the result is a view of the filtered series from sample p on.
        """
        b = np.concatenate([[1.0], -np.asarray(coefs, dtype=float)])
        transfer = _fft.rfft(b, n=self.n_fft)
        product = self.spectrum * transfer
        out = _fft.irfft(product, n=self.n_fft, axis=1)
        self._last = (b, product, out)
        if self.complete:
            return out[:, b.size - 1 : self.n_times]
        return out[:, : self.n_times][:, self.kept(b.size - 1)]

    def kept_spectrum(self, coefs: np.ndarray, *, max_edge: int = 64) -> np.ndarray | None:
        """DFT of the whitened rows 1.. (the design) on the kept samples, from the last apply.

        Parameters
        ----------
        coefs : ndarray, shape (p,)
            The AR coefficients of the last :meth:`apply` call.
        max_edge : int, default=64
            Give up (None) when more than this many circular output samples are not kept.

        Returns
        -------
        ndarray, shape (n_series - 1, n_fft // 2 + 1), complex, or None
            ``Σ_t w_t e^{-2πi f t / n_fft}`` over the kept samples ``w_t`` (t = p..n-1) of
            each whitened series but the first: the DFT of the kept samples zero-padded to
            ``n_fft`` and shifted by p samples (a common factor ``e^{-2πi f p / n_fft}`` per
            frequency).  None without gaps-free data, a matching last apply, or when
            ``next_fast_len(n - p)`` differs from ``n_fft`` (another frequency grid).

        Notes
        -----
        The circular filter output ``c = IDFT(Z B)`` equals the whitened series on the
        kept samples; the others (the first p and the zero-padding tail) are subtracted
        from ``Z B`` by their own Fourier sums, which costs a small matrix product
        instead of a forward FFT of every series.
        """
        last = getattr(self, "_last", None)
        b = np.concatenate([[1.0], -np.asarray(coefs, dtype=float)])
        if not self.complete or last is None or not np.array_equal(last[0], b):
            return None
        p = b.size - 1
        if _fft.next_fast_len(self.n_times - p, real=True) != self.n_fft:
            return None
        edge = np.concatenate([np.arange(p), np.arange(self.n_times, self.n_fft)])
        if edge.size > max_edge:
            return None
        product, out = last[1][1:], last[2][1:]
        if edge.size == 0:
            return product.copy()
        step = np.exp(-2j * np.pi * np.arange(product.shape[1]) / self.n_fft)
        if edge.size == p:  # powers step**t, t = 0..p-1, by repeated products
            phases = np.empty((p, step.size), dtype=complex)
            phases[0] = 1.0
            for t in range(1, p):
                np.multiply(phases[t - 1], step, out=phases[t])
        else:
            phases = np.exp(-2j * np.pi * np.outer(edge, np.arange(step.size)) / self.n_fft)
        # in the real view (Re, Im interleaved) the correction is one real matrix product
        correction = np.ascontiguousarray(out[:, edge]) @ phases.view(np.float64)
        result = np.subtract(product.view(np.float64), correction, out=correction)
        return result.view(complex)

    def gram(self, coefs: np.ndarray, *, max_dropped: float = 0.1) -> np.ndarray | None:
        """Gram matrix ``W W'`` of the whitened samples ``W = apply(coefs)``, without forming W.

        Parameters
        ----------
        coefs : ndarray, shape (p,)
            AR coefficients.
        max_dropped : float, default=0.1
            Give up (return None) when more than this share of the samples needs the
            correction below; the caller then uses :meth:`apply`.

        Returns
        -------
        ndarray, shape (n_series, n_series) or None

        Notes
        -----
        By Parseval's theorem the circularly filtered series ``c = IDFT(Z B)`` have
        ``c c' = Σ_f side_f |B_f|² Re(Z_f^* Z_f') / n_fft`` (one-sided sum).  ``c``
        equals the whitened series on the kept samples; the samples dropped by the
        whitening (the first p, those after gaps, and the tail of the zero padding)
        are computed directly from their p + 1 taps and their outer products
        subtracted.  The cost is one weighted Gram matrix of the stored spectrum
        instead of an inverse FFT of every series.
        """
        b = np.concatenate([[1.0], -np.asarray(coefs, dtype=float)])
        p = b.size - 1
        transfer = _fft.rfft(b, n=self.n_fft)
        power = (transfer.real**2 + transfer.imag**2) * self._side
        scaled = self.spectrum * np.sqrt(power)
        flat = scaled.view(np.float64)  # Re and Im interleaved: Re·Re + Im·Im = Re(Z^* Z')
        gram = flat @ flat.T
        if p == 0:
            return gram
        if self.complete:  # dropped: the first p samples and the padding tail's first p
            dropped = np.concatenate(
                [np.arange(p), np.arange(self.n_times, min(self.n_fft, self.n_times + p))]
            )
            return gram - self._edge_gram(b, dropped)
        # samples of the circular output that are not kept but may be non-zero
        valid = np.zeros(self.n_fft, dtype=bool)
        valid[: self.n_times] = self.valid
        kept = np.zeros(self.n_fft, dtype=bool)
        kept[: self.n_times] = self.kept(p)
        count = np.concatenate([[0], np.cumsum(np.concatenate([valid[-p:], valid]))])
        touched = count[p + 1 :] - count[: self.n_fft] > 0  # a valid tap in t-p..t (circular)
        dropped = np.flatnonzero(touched & ~kept)
        if dropped.size > max_dropped * self.n_times:
            return None
        return gram - self._edge_gram(b, dropped)

    def _edge_gram(self, b: np.ndarray, dropped: np.ndarray) -> np.ndarray:
        """Gram matrix of the circular filter output at the samples ``dropped``."""
        out = np.zeros((self.rows.shape[0], dropped.size))
        for i in range(b.size):
            idx = dropped - i
            idx[idx < 0] += self.n_fft
            inside = idx < self.n_times
            out[:, inside] += b[i] * self.rows[:, idx[inside]]
        return out @ out.T
