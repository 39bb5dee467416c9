"""Expected noise of a measured g2 curve, per lag (for weighting fits and for simulation).

The model is the photon-counting noise of a single-exponential intensity
autocorrelation (Koppel 1974), in the form adapted to DCS by Zhou et al. 2006.
Both the form and its use here are recalled from memory; the tests check its
limits (shot-noise scaling with count rate, √(T/t) scaling with averaging time),
not its published constants.
"""

from __future__ import annotations

import numpy as np

__all__ = ["bin_widths_s", "g2_noise_sd", "multi_tau_lags"]


def bin_widths_s(lags_s) -> np.ndarray:
    """Correlator bin width at each lag, in s, taken as the spacing of the lags.

    For a linear correlator with lags k·T this is T at every lag; for a multi-tau
    correlator it is the (growing) spacing within each level.

    Parameters
    ----------
    lags_s : array_like, shape (n_lags,)
        Increasing lag times in seconds (> 0).

    Returns
    -------
    ndarray, shape (n_lags,)
    """
    lags = np.asarray(lags_s, dtype=float)
    return np.diff(lags, prepend=0.0)


def g2_noise_sd(
    lags_s,
    *,
    beta,
    decay_rate_hz,
    count_rate_hz,
    integration_time_s,
    bin_width_s=None,
) -> np.ndarray:
    """Standard deviation of a measured g2 value at each lag (unitless).

    Parameters
    ----------
    lags_s : array_like, shape (n_lags,)
        Lag times τ in s.
    beta : float or ndarray, shape (n_curves,)
        Coherence factor β.
    decay_rate_hz : float or ndarray, shape (n_curves,)
        Decay rate Γ of g1 in 1/s for a single-exponential approximation g1 = e^{-Γτ}
        (e.g. the reciprocal of the lag at which g1 falls to 1/e).
    count_rate_hz : float or ndarray, shape (n_curves,)
        Detected photon count rate I in counts per second.
    integration_time_s : float or ndarray, shape (n_curves,)
        Averaging time t of one curve in s (the reciprocal of the curve rate).
    bin_width_s : array_like, shape (n_lags,), optional
        Correlator bin width T at each lag; default :func:`bin_widths_s`.

    Returns
    -------
    ndarray, shape (n_curves, n_lags) (or (n_lags,) for scalar inputs)

    Notes
    -----
    With <n> = I·T the mean count per bin and m = τ/T the bin index::

        σ(τ) = √(T/t) · [ β² ((1 + e^{-2ΓT})(1 + e^{-2Γτ}) + 2m(1 - e^{-2ΓT}) e^{-2Γτ})
                          / (1 - e^{-2ΓT})
                          + 2 β (1 + e^{-2Γτ}) / <n> + (1 + β e^{-Γτ}) / <n>² ]^{1/2}

    References
    ----------
    Koppel 1974, Phys Rev A 10:1938; Zhou et al. 2006, Opt Express 14:1125 (form
    recalled from memory).
    """
    lags = np.asarray(lags_s, dtype=float)
    width = bin_widths_s(lags) if bin_width_s is None else np.asarray(bin_width_s, dtype=float)
    beta = np.asarray(beta, dtype=float)[..., None]
    gamma = np.asarray(decay_rate_hz, dtype=float)[..., None]
    rate = np.asarray(count_rate_hz, dtype=float)[..., None]
    t_int = np.asarray(integration_time_s, dtype=float)[..., None]
    counts = rate * width
    m = lags / width
    e_t = np.exp(-2.0 * gamma * width)
    e_tau = np.exp(-2.0 * gamma * lags)
    # 1 - e^{-2ΓT} with expm1 for accuracy when ΓT is small
    one_minus = -np.expm1(-2.0 * gamma * width)
    term_beta = beta**2 * ((1.0 + e_t) * (1.0 + e_tau) + 2.0 * m * one_minus * e_tau) / one_minus
    with np.errstate(divide="ignore"):
        term_shot = 2.0 * beta * (1.0 + e_tau) / counts + (1.0 + beta * np.sqrt(e_tau)) / counts**2
    return np.sqrt(width / t_int) * np.sqrt(term_beta + term_shot)


def multi_tau_lags(n_lags: int = 100, *, first_lag_s: float = 1e-6, lags_per_level: int = 8):
    """Lag times of a multi-tau correlator, in s.

    The first level holds ``lags_per_level`` lags spaced by ``first_lag_s``; each
    further level doubles the bin width and adds ``lags_per_level`` lags (common
    practice in hardware and software correlators).

    Parameters
    ----------
    n_lags : int, default=100
    first_lag_s : float, default=1e-6
        Bin width (and first lag) of the first level.
    lags_per_level : int, default=8

    Returns
    -------
    ndarray, shape (n_lags,)
        Increasing lag times; e.g. 100 lags from 1 µs reach about 30 ms.
    """
    lags = []
    width = first_lag_s
    last = 0.0
    while len(lags) < n_lags:
        for _ in range(lags_per_level):
            last += width
            lags.append(last)
            if len(lags) == n_lags:
                break
        width *= 2.0
    return np.asarray(lags)
