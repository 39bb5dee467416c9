"""Raw intensity autocorrelation curves g2(τ) with photon noise, for simulated recordings.

Noise-free curves come from the forward model of :mod:`fstats.flow.forward`
(semi-infinite correlation diffusion, Brownian motion, Siegert relation); the
simulator keeps no copy of it.  Noise is added per lag from the DCS noise model
of Zhou et al. 2006 (Opt Express 14:1125; extending Koppel 1974), *recalled from
memory*, for a single exponential decay g1 = e^{-Γτ}:

    σ(τ) = sqrt(T/t) · [ β² ((1 + e^{-2ΓT})(1 + e^{-2Γτ}) + 2m (1 - e^{-2ΓT}) e^{-2Γτ})
                         / (1 - e^{-2ΓT})
                         + 2 β (1 + e^{-2Γτ}) / <n> + (1 + β e^{-Γτ}) / <n>² ]^{1/2},

with T the correlator bin width at lag τ, t the integration time of one curve,
m = τ/T, <n> = I·T the mean photon count per bin and Γ the decay rate of g1 (taken
as 1/τ_e, with τ_e the 1/e time of the forward-model g1).  The noise is treated as
Gaussian and independent between lags (real correlator noise is correlated
between neighbouring lags).  Lags are log-spaced, like a multi-tau correlator; the
bin width is the lag spacing, never below the smallest lag.
"""

from __future__ import annotations

import numpy as np

__all__ = ["correlator_lags", "g2_noise_std", "simulate_g2"]


def correlator_lags(n_lags: int = 100, lag_range_s: tuple[float, float] = (1e-7, 1e-2)):
    """Log-spaced correlator lags and their bin widths, in seconds.

    Parameters
    ----------
    n_lags : int, default=100
    lag_range_s : (float, float), default=(1e-7, 1e-2)
        First and last lag in seconds.

    Returns
    -------
    lags_s : ndarray, shape (n_lags,)
    bin_widths_s : ndarray, shape (n_lags,)
        Spacing to the next lag (the last repeats the previous ratio), at least the
        first lag.
    """
    lags = np.geomspace(lag_range_s[0], lag_range_s[1], n_lags)
    ratio = lags[1] / lags[0]
    widths = np.maximum(lags * (ratio - 1.0), lag_range_s[0])
    return lags, widths


def g2_noise_std(lags_s, bin_widths_s, decay_rate_hz, beta, count_rate_hz, integration_s):
    """Standard deviation of measured g2 at each lag (unitless), Zhou et al. 2006 model.

    Parameters
    ----------
    lags_s, bin_widths_s : ndarray, shape (n_lags,)
        Lag times and correlator bin widths, s.
    decay_rate_hz : ndarray, shape (...,)
        Decay rate Γ of g1 (1/s) per curve.
    beta : ndarray or float, shape (...,)
        Coherence factor per curve.
    count_rate_hz : ndarray, shape (...,)
        Detected count rate per curve, counts/s.
    integration_s : float
        Integration time of one curve, s.

    Returns
    -------
    ndarray, shape (..., n_lags)

    Notes
    -----
    The formula is given in the module docstring (recalled from memory).
    """
    gamma = np.asarray(decay_rate_hz, dtype=float)[..., None]
    beta = np.asarray(beta, dtype=float)[..., None] + 0.0 * gamma
    counts = np.asarray(count_rate_hz, dtype=float)[..., None] * bin_widths_s
    m = lags_s / bin_widths_s
    e_t = np.exp(-2.0 * gamma * bin_widths_s)
    e_tau = np.exp(-2.0 * gamma * lags_s)
    speckle = beta**2 * ((1.0 + e_t) * (1.0 + e_tau) + 2.0 * m * (1.0 - e_t) * e_tau) / (1.0 - e_t)
    shot = 2.0 * beta * (1.0 + e_tau) / counts + (1.0 + beta * np.sqrt(e_tau)) / counts**2
    return np.sqrt(bin_widths_s / integration_s) * np.sqrt(speckle + shot)


def simulate_g2(
    bfi_cm2_s: np.ndarray,
    count_rate_hz: np.ndarray,
    beta: np.ndarray,
    separation_cm: np.ndarray,
    sfreq_hz: float,
    rng: np.random.Generator,
    *,
    n_lags: int = 100,
    lag_range_s: tuple[float, float] = (1e-7, 1e-2),
    mua_per_cm: float = 0.1,
    musp_per_cm: float = 10.0,
) -> tuple[np.ndarray, np.ndarray]:
    """Noisy g2 curves for every sample and channel of a flow series.

    Parameters
    ----------
    bfi_cm2_s : ndarray, shape (n_times, n_channels)
        True BFi (cm²/s) behind each curve.
    count_rate_hz : ndarray, shape (n_times, n_channels)
        Detected count rate, counts/s.
    beta : ndarray, shape (n_channels,)
        Coherence factor per channel.
    separation_cm : ndarray, shape (n_channels,)
        Source-detector separation per channel, cm.
    sfreq_hz : float
        Curve rate in Hz (integration time 1/sfreq_hz).
    rng : numpy.random.Generator
    n_lags : int, default=100
    lag_range_s : (float, float), default=(1e-7, 1e-2)
    mua_per_cm, musp_per_cm : float, default=0.1, 10.0
        Optical properties of the homogeneous medium, 1/cm.

    Returns
    -------
    g2 : ndarray, shape (n_times, n_channels, n_lags)
    lags_s : ndarray, shape (n_lags,)
    """
    from fstats.flow.forward import g1_semi_infinite  # lazy: the forward model lives in flow

    lags, widths = correlator_lags(n_lags, lag_range_s)
    n_times, n_channels = bfi_cm2_s.shape
    g2 = np.empty((n_times, n_channels, n_lags))
    fine = np.geomspace(lag_range_s[0] / 10.0, lag_range_s[1], 2000)
    for c in range(n_channels):
        optics = dict(
            separation_cm=float(separation_cm[c]), mua_per_cm=mua_per_cm, musp_per_cm=musp_per_cm
        )
        g1 = g1_semi_infinite(lags, bfi_cm2_s[:, c], **optics)
        # Γ = 1/τ_e; g1 depends on BFi·τ only, so τ_e scales as 1/BFi.
        reference_bfi = float(np.median(bfi_cm2_s[:, c]))
        g1_fine = g1_semi_infinite(fine, reference_bfi, **optics)
        tau_e = float(np.interp(-1.0, -g1_fine, fine))
        decay = bfi_cm2_s[:, c] / reference_bfi / tau_e
        clean = 1.0 + beta[c] * g1**2
        std = g2_noise_std(lags, widths, decay, beta[c], count_rate_hz[:, c], 1.0 / sfreq_hz)
        g2[:, c, :] = clean + std * rng.standard_normal(clean.shape)
    return g2, lags
