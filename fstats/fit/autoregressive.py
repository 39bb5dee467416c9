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
    if valid.all():  # no gaps: every sample but the first p
        kept = np.ones(valid.shape, dtype=bool)
        kept[:order] = False
        return kept
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
