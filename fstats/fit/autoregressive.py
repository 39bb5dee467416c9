"""Autoregressive noise models: autocovariance, Levinson-Durbin, BIC order choice, whitening.

Everything here is pure numpy/scipy on arrays.  Missing samples (NaN rows of the
fit) are handled the same way throughout:

* autocovariances are computed with the missing samples set to zero, so a lag-k
  product only counts pairs where both samples exist; the sum is divided by the
  number of valid samples (``"mle"``, the biased estimator that keeps the
  Toeplitz matrix positive definite) or by the number of valid pairs at that lag
  (``"adjusted"``, which is what ``statsmodels.regression.linear_model.yule_walker``
  uses by default without gaps);
* the whitening filter ``e_t = r_t - sum_i a_i r_{t-i}`` is only evaluated where
  sample ``t`` and its ``p`` predecessors all exist.  Other rows are dropped from the
  whitened regression; this is the Cochrane-Orcutt convention (the first ``p`` rows
  are dropped, as ``statsmodels`` GLSAR does) applied after every gap as well.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import fft as _fft

__all__ = [
    "AR_METHODS",
    "ARModel",
    "autocovariance",
    "levinson_durbin",
    "fit_ar",
    "whiten",
    "whitened_rows",
    "Whitener",
    "default_max_ar_order",
]

#: Up to this many lags, the autocovariance of one series is summed directly.
_DIRECT_MAX_LAG = 128

#: Autocovariance normalisations accepted by :func:`autocovariance`.
AR_METHODS: tuple[str, ...] = ("mle", "adjusted")


@dataclass(frozen=True, eq=False)
class ARModel:
    """An AR(p) model of a noise series.

    Parameters
    ----------
    coefs : ndarray, shape (p,)
        AR coefficients ``a_1..a_p`` in ``r_t = sum_i a_i r_{t-i} + e_t``.
    innovation_var : float
        Variance of the innovations ``e_t`` (flow unit squared).
    bic : ndarray, shape (max_order + 1,)
        Bayesian information criterion for orders ``0..max_order`` (NaN where not computed).
    """

    coefs: np.ndarray
    innovation_var: float
    bic: np.ndarray

    @property
    def order(self) -> int:
        """The model order p."""
        return int(self.coefs.size)


def default_max_ar_order(sfreq_hz: float) -> int:
    """The default largest AR order tried by the order selection: 4 s of samples.

    Parameters
    ----------
    sfreq_hz : float
        Sampling rate in Hz.

    Returns
    -------
    int
        ``ceil(4 * sfreq_hz)``, at least 1 (80 at 20 Hz, 40 at 10 Hz).

    Notes
    -----
    A maximum order of about four times the sampling rate (4 s of lags) is what
    published AR-IRLS practice uses for optical brain recordings (recalled from
    memory).  At 20 Hz this spans several cardiac periods and a respiratory cycle,
    so the prewhitening filter can follow the pulse and the slow fluctuations.
    """
    return max(1, int(np.ceil(4.0 * float(sfreq_hz))))


def autocovariance(
    series: np.ndarray, max_lag: int, *, method: str = "mle", demean: bool = True
) -> np.ndarray:
    """Sample autocovariance at lags 0..max_lag, ignoring NaN samples.

    Parameters
    ----------
    series : ndarray, shape (n_times,) or (n_times, n_series)
        Residual series (flow unit); NaN marks missing samples.
    max_lag : int
        Largest lag in samples.
    method : {"mle", "adjusted"}, default="mle"
        Divide lag-k sums by the number of valid samples (``"mle"``) or by the number
        of valid pairs at lag k (``"adjusted"``).
    demean : bool, default=True
        Subtract the mean of the valid samples first.

    Returns
    -------
    ndarray, shape (max_lag + 1,) or (max_lag + 1, n_series)
        Autocovariances in the series' unit squared.
    """
    if method not in AR_METHODS:
        raise ValueError(f"method must be one of {AR_METHODS}, not {method!r}")
    x = np.asarray(series, dtype=float)
    one_d = x.ndim == 1
    if one_d:
        x = x[:, None]
    valid = np.isfinite(x)
    complete = bool(valid.all())
    if not complete:
        x = np.where(valid, x, 0.0)
    n_valid = valid.sum(axis=0)
    if demean:
        mean = x.sum(axis=0) / np.maximum(n_valid, 1)
        x = x - mean if complete else np.where(valid, x - mean, 0.0)
    n = x.shape[0]
    direct = one_d and max_lag <= _DIRECT_MAX_LAG
    if direct:  # a few lags of one series: lagged products beat two FFTs of length 2n
        sums = _lagged_sums(x[:, 0], max_lag)[:, None]
    else:
        n_fft = _fft.next_fast_len(2 * n - 1, real=True)
        spec = _fft.rfft(x, n=n_fft, axis=0)
        sums = _fft.irfft(spec * np.conj(spec), n=n_fft, axis=0)[: max_lag + 1]
    if method == "mle":
        denom = np.broadcast_to(n_valid.astype(float), sums.shape)
    elif complete:
        denom = (n - np.arange(max_lag + 1, dtype=float))[:, None] * np.ones(x.shape[1])
    elif direct:
        v = valid[:, 0].astype(float)
        denom = np.array([[v[k:] @ v[: n - k]] for k in range(max_lag + 1)])
    else:
        v = valid.astype(float)
        vs = _fft.rfft(v, n=n_fft, axis=0)
        denom = np.rint(_fft.irfft(vs * np.conj(vs), n=n_fft, axis=0)[: max_lag + 1])
    with np.errstate(invalid="ignore", divide="ignore"):
        acov = sums / np.where(denom > 0, denom, np.nan)
    return acov[:, 0] if one_d else acov


def _lagged_sums(col: np.ndarray, max_lag: int, block: int = 64) -> np.ndarray:
    """``Σ_t x_t x_{t+k}`` for k = 0..max_lag, as one matrix product over blocks.

    The series (zero-padded) is cut into blocks of ``block`` samples; with Y the
    windows of ``block + max_lag`` samples starting at each block, ``G = Y[:, :block]' Y``
    holds every product of a sample with the samples up to ``max_lag`` after it, and
    the lag-k sum is the sum of G's k-th superdiagonal (the same sums as the dot
    products ``x[k:] @ x[:n-k]``, rounding aside).
    """
    n = col.shape[0]
    n_blocks = -(-n // block)
    padded = np.zeros(n_blocks * block + max_lag)
    padded[:n] = col
    step = padded.strides[0]
    windows = np.lib.stride_tricks.as_strided(
        padded, shape=(n_blocks, block + max_lag), strides=(block * step, step), writeable=False
    )
    gram = windows[:, :block].T @ windows  # (block, block + max_lag)
    s0, s1 = gram.strides
    diagonals = np.lib.stride_tricks.as_strided(
        gram, shape=(max_lag + 1, block), strides=(s1, s0 + s1), writeable=False
    )
    return diagonals.sum(axis=1)


def levinson_durbin(acov: np.ndarray, max_order: int) -> tuple[list[np.ndarray], np.ndarray]:
    """Yule-Walker AR fits of every order up to ``max_order`` by the Levinson-Durbin recursion.

    Parameters
    ----------
    acov : ndarray, shape (>= max_order + 1,)
        Autocovariances at lags 0, 1, ... (unit squared).
    max_order : int
        Largest AR order.

    Returns
    -------
    coefs : list of ndarray
        ``coefs[p]`` has shape (p,): the AR(p) coefficients (``coefs[0]`` is empty).
    innovation_var : ndarray, shape (max_order + 1,)
        Innovation variance of each order (``acov[0]`` for order 0).

    Notes
    -----
    Solves the Toeplitz system ``R a = r`` for every order at O(p²) total cost
    (Levinson 1947; Durbin 1960).  The recursion stops early, repeating the last
    stable order, if the innovation variance stops being positive.
    """
    r = np.asarray(acov, dtype=float)
    coefs: list[np.ndarray] = [np.zeros(0)]
    var = np.full(max_order + 1, np.nan)
    var[0] = r[0]
    a = np.zeros(max_order)
    e = r[0]
    stable = 0  # the last order whose innovation variance stayed positive
    for p in range(1, max_order + 1):
        if not e > 0:
            coefs.append(a[:stable].copy())
            var[p] = var[p - 1]
            continue
        if p > 1:
            k = (r[p] - a[: p - 1] @ r[p - 1 : 0 : -1]) / e
            a[: p - 1] = a[: p - 1] - k * a[p - 2 :: -1]
        else:
            k = r[1] / e
        a[p - 1] = k
        e = e * (1.0 - k * k)
        coefs.append(a[:p].copy())
        var[p] = e
        stable = p
    return coefs, var


def fit_ar(
    residuals: np.ndarray,
    max_order: int,
    *,
    order: int | None = None,
    method: str = "mle",
    demean: bool = True,
) -> ARModel:
    """Fit an AR(p) model to residuals, choosing p by BIC unless it is given.

    Parameters
    ----------
    residuals : ndarray, shape (n_times,)
        Residual series (flow unit); NaN marks missing samples.
    max_order : int
        Largest order tried by the BIC search.
    order : int, optional
        A fixed order (no search).
    method : {"mle", "adjusted"}, default="mle"
        Autocovariance normalisation (see :func:`autocovariance`).
    demean : bool, default=True
        Subtract the residual mean first.

    Returns
    -------
    ARModel
        Coefficients, innovation variance and the BIC curve.

    Notes
    -----
    BIC(p) = n log(σ²_p) + p log(n), with n the number of valid samples and σ²_p the
    Yule-Walker innovation variance of order p (Schwarz 1978).
    """
    top = int(order if order is not None else max_order)
    n = int(np.isfinite(residuals).sum())
    top = max(0, min(top, n // 2 - 1))
    acov = autocovariance(residuals, top, method=method, demean=demean)
    coefs, var = levinson_durbin(acov, top)
    with np.errstate(divide="ignore", invalid="ignore"):
        bic = n * np.log(var) + np.arange(top + 1) * np.log(max(n, 2))
    if order is not None:
        chosen = top
    else:
        finite = np.where(np.isfinite(bic), bic, np.inf)
        chosen = int(np.argmin(finite)) if np.isfinite(finite).any() else 0
    full_bic = np.full(int(order if order is not None else max_order) + 1, np.nan)
    full_bic[: bic.size] = bic
    return ARModel(coefs=coefs[chosen], innovation_var=float(var[chosen]), bic=full_bic)


def whitened_rows(valid: np.ndarray, order: int) -> np.ndarray:
    """Which rows survive whitening with an AR(order) filter.

    Parameters
    ----------
    valid : ndarray of bool, shape (n_times,)
        Rows with data.
    order : int
        AR order p.

    Returns
    -------
    ndarray of bool, shape (n_times,)
        True where row t and rows t-1..t-p are all valid (so the first p rows are dropped).
    """
    valid = np.asarray(valid, dtype=bool)
    if order == 0:
        return valid.copy()
    bad = np.concatenate([np.ones(order, dtype=np.int64), (~valid).astype(np.int64)])
    csum = np.concatenate([[0], np.cumsum(bad)])
    window = csum[order + 1 :] - csum[: -order - 1]
    return window == 0


def whiten(values: np.ndarray, coefs: np.ndarray, valid: np.ndarray) -> np.ndarray:
    """Apply the AR prewhitening filter ``x_t - sum_i a_i x_{t-i}`` along time.

    Parameters
    ----------
    values : ndarray, shape (n_times,) or (n_times, n_columns)
        Flow or design columns; rows where ``valid`` is False are ignored.
    coefs : ndarray, shape (p,)
        AR coefficients.
    valid : ndarray of bool, shape (n_times,)
        Rows with data.

    Returns
    -------
    ndarray, shape (n_kept,) or (n_kept, n_columns)
        The whitened rows selected by :func:`whitened_rows`.
    """
    x = np.where(np.reshape(valid, (-1,) + (1,) * (np.ndim(values) - 1)), values, 0.0)
    b = np.concatenate([[1.0], -np.asarray(coefs, dtype=float)])
    kept = whitened_rows(valid, b.size - 1)
    if b.size == 1:
        filtered = x.astype(float)
    elif x.ndim == 1:  # one series: direct convolution beats the FFT at these lengths
        filtered = np.convolve(x.astype(float), b)[: x.shape[0]]
    elif b.size <= 12:
        filtered = np.array(x, dtype=float)
        for i in range(1, b.size):
            filtered[i:] += b[i] * x[:-i]
    else:  # FFT convolution along time, one series per row (the fast layout)
        rows = np.ascontiguousarray(x.T)
        n_fft = _fft.next_fast_len(x.shape[0] + b.size - 1, real=True)
        spectrum = _fft.rfft(rows, n=n_fft, axis=1) * _fft.rfft(b, n=n_fft)
        out = _fft.irfft(spectrum, n=n_fft, axis=1)
        return out[:, : x.shape[0]][:, kept].T  # (n_kept, n_columns), a transposed view
    return filtered[kept]


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
