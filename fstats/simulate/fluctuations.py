"""Random fluctuations with a prescribed spectrum, made by spectral shaping of white noise.

Gaussian white noise is transformed to the frequency domain, multiplied by the
square root of the wanted power spectrum and transformed back.  The series is
generated on a longer, padded grid and cropped, so its two ends are not tied
together by the circular transform.  Every function returns unit-variance series
in expectation (the variance of one realisation scatters around 1, as it does for
real slow physiology).
"""

from __future__ import annotations

import numpy as np
from scipy import fft

__all__ = ["shaped_noise", "power_law_noise", "band_noise", "lagged"]


def shaped_noise(
    n_times: int,
    sfreq_hz: float,
    amplitude,
    rng: np.random.Generator,
    *,
    n_series: int | None = None,
) -> np.ndarray:
    """Gaussian noise whose spectrum has the shape ``amplitude(f)**2`` (unit variance expected).

    Parameters
    ----------
    n_times : int
        Number of samples.
    sfreq_hz : float
        Sampling rate in Hz.
    amplitude : callable
        Maps frequencies (Hz, ndarray) to the square root of the relative power
        spectral density; the value at 0 Hz is ignored (zero mean).
    rng : numpy.random.Generator
    n_series : int, optional
        Number of independent series to draw at once.

    Returns
    -------
    ndarray, shape (n_times,), or (n_times, n_series) when ``n_series`` is given
        Series with expected variance 1.
    """
    n_pad = fft.next_fast_len(int(n_times * 1.5) + 16, real=True)
    freqs = fft.rfftfreq(n_pad, d=1.0 / sfreq_hz)
    amp = np.zeros(freqs.size)
    amp[1:] = amplitude(freqs[1:])
    shape = (freqs.size,) if n_series is None else (n_series, freqs.size)
    spectrum = amp * (rng.standard_normal(shape) + 1j * rng.standard_normal(shape))
    series = fft.irfft(spectrum, n=n_pad, axis=-1)
    # Expected variance of irfft: x_t = (1/N)[Re X_0 + 2 Σ Re(X_k e^{iωt}) + Re X_{N/2}(-1)^t],
    # and Var Re(a (u + iv) e^{iθ}) = a² for standard normal u, v.
    weights = np.full(freqs.size, 4.0)
    weights[0] = 1.0
    if n_pad % 2 == 0:
        weights[-1] = 1.0
    expected_var = np.sum(weights * amp**2) / n_pad**2
    out_shape = (n_times,) if n_series is None else (n_times, n_series)
    if expected_var <= 0:
        return np.zeros(out_shape)
    start = (n_pad - n_times) // 2
    return series[..., start : start + n_times].T / np.sqrt(expected_var)


def power_law_noise(
    n_times: int,
    sfreq_hz: float,
    exponent: float,
    rng: np.random.Generator,
    *,
    min_hz: float = 0.002,
    max_hz: float | None = None,
    n_series: int | None = None,
) -> np.ndarray:
    """Unit-variance noise with power spectral density ∝ 1/f^exponent.

    Parameters
    ----------
    n_times : int
        Number of samples.
    sfreq_hz : float
        Sampling rate in Hz.
    exponent : float
        Spectral exponent β (1 = "pink" 1/f noise, 0 = white).
    rng : numpy.random.Generator
    min_hz : float, default=0.002
        Corner frequency below which the spectrum flattens, in Hz.
    max_hz : float, optional
        Corner frequency above which the spectrum falls off steeply (f^-6 beyond
        the power law), in Hz; None keeps the power law up to Nyquist.
    n_series : int, optional
        Number of independent series to draw at once.

    Returns
    -------
    ndarray, shape (n_times,), or (n_times, n_series) when ``n_series`` is given

    Notes
    -----
    PSD(f) = (f² + f_min²)^(-β/2) · [1 + (f/f_max)^6]^-1; the local log-log slope is
    -β·f²/(f² + f_min²), within 0.15 of -β for f > 2.5 f_min (and f ≪ f_max).
    """

    def amplitude(freqs):
        psd = (freqs**2 + min_hz**2) ** (-exponent / 2.0)
        if max_hz is not None:
            psd = psd / (1.0 + (freqs / max_hz) ** 6)
        return np.sqrt(psd)

    return shaped_noise(n_times, sfreq_hz, amplitude, rng, n_series=n_series)


def band_noise(
    n_times: int,
    sfreq_hz: float,
    centre_hz: float,
    width_hz: float,
    rng: np.random.Generator,
) -> np.ndarray:
    """Unit-variance narrow-band noise (Gaussian spectral peak), e.g. Mayer waves.

    Parameters
    ----------
    n_times : int
    sfreq_hz : float
        Sampling rate in Hz.
    centre_hz : float
        Centre of the spectral peak in Hz.
    width_hz : float
        Standard deviation of the Gaussian peak in Hz.
    rng : numpy.random.Generator

    Returns
    -------
    ndarray, shape (n_times,)
    """

    def amplitude(freqs):
        return np.exp(-0.25 * ((freqs - centre_hz) / width_hz) ** 2)  # sqrt of a Gaussian

    return shaped_noise(n_times, sfreq_hz, amplitude, rng)


def lagged(series: np.ndarray, lag_s: float, sfreq_hz: float) -> np.ndarray:
    """A series delayed by ``lag_s`` seconds (linear interpolation; the start is held).

    Parameters
    ----------
    series : ndarray, shape (n_times,)
    lag_s : float
        Delay in seconds (>= 0 delays, < 0 advances).
    sfreq_hz : float

    Returns
    -------
    ndarray, shape (n_times,)
        ``out[i] = series(t_i - lag_s)``, holding the first/last value outside the record.
    """
    index = np.arange(series.size, dtype=float)
    return np.interp(index - lag_s * sfreq_hz, index, series)
