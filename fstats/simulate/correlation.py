"""Raw intensity autocorrelation curves g2(τ) with photon noise, for simulated recordings.

Noise-free curves come from the forward model of :mod:`fstats.flow.forward`
(semi-infinite correlation diffusion, Brownian motion, Siegert relation), and the
per-lag noise level from the photon-counting noise model of
:func:`fstats.flow.noise.g2_noise_sd` (Koppel 1974; Zhou et al. 2006, Opt Express
14:1125; form recalled from memory), evaluated for the decay rate Γ = 1/τ_e of the
true curve (τ_e: the lag at which g1 falls to 1/e), the count rate of the sample
and an integration time of one sample period.  The simulator keeps no copy of
either.  The noise is drawn Gaussian and independent between lags (real
correlator noise is correlated between neighbouring lags, and non-Gaussian at
very low counts per bin).  Lags are those of a multi-tau correlator
(:func:`fstats.flow.noise.multi_tau_lags`).
"""

from __future__ import annotations

import numpy as np

__all__ = ["correlator_lags", "simulate_g2"]


def correlator_lags(n_lags: int = 100, first_lag_s: float = 1e-7, lags_per_level: int = 7):
    """Multi-tau correlator lags in seconds (7 per level from 0.1 µs reach ~10 ms at 100 lags).

    Parameters
    ----------
    n_lags : int, default=100
    first_lag_s : float, default=1e-7
        First lag and first-level bin width, s.
    lags_per_level : int, default=7
        Lags per level; the bin width doubles from level to level.

    Returns
    -------
    ndarray, shape (n_lags,)
    """
    from fstats.flow.noise import multi_tau_lags

    return multi_tau_lags(n_lags, first_lag_s=first_lag_s, lags_per_level=lags_per_level)


def simulate_g2(
    bfi_cm2_s: np.ndarray,
    count_rate_hz: np.ndarray,
    beta: np.ndarray,
    separation_cm: np.ndarray,
    sfreq_hz: float,
    rng: np.random.Generator,
    *,
    n_lags: int = 100,
    first_lag_s: float = 1e-7,
    lags_per_level: int = 7,
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
    first_lag_s : float, default=1e-7
    lags_per_level : int, default=7
        Multi-tau lag layout (:func:`correlator_lags`).
    mua_per_cm, musp_per_cm : float, default=0.1, 10.0
        Optical properties of the homogeneous medium, 1/cm.

    Returns
    -------
    g2 : ndarray, shape (n_times, n_channels, n_lags)
    lags_s : ndarray, shape (n_lags,)
    """
    # lazy imports: the forward and noise models live in the flow stage
    from fstats.flow.forward import g1_semi_infinite
    from fstats.flow.noise import g2_noise_sd

    lags = correlator_lags(n_lags, first_lag_s, lags_per_level)
    n_times, n_channels = bfi_cm2_s.shape
    g2 = np.empty((n_times, n_channels, n_lags))
    fine = np.geomspace(lags[0] / 10.0, lags[-1] * 10.0, 4000)
    for c in range(n_channels):
        optics = dict(
            separation_cm=float(separation_cm[c]), mua_per_cm=mua_per_cm, musp_per_cm=musp_per_cm
        )
        g1 = g1_semi_infinite(lags, bfi_cm2_s[:, c], **optics)
        # Γ = 1/τ_e; g1 depends on BFi·τ only, so τ_e scales as 1/BFi.
        reference_bfi = float(np.median(bfi_cm2_s[:, c]))
        g1_fine = g1_semi_infinite(fine, reference_bfi, **optics)
        tau_e = float(np.interp(-np.exp(-1.0), -g1_fine, fine))
        decay = bfi_cm2_s[:, c] / reference_bfi / tau_e
        clean = 1.0 + beta[c] * g1**2
        std = g2_noise_sd(
            lags,
            beta=beta[c],
            decay_rate_hz=decay,
            count_rate_hz=count_rate_hz[:, c],
            integration_time_s=1.0 / sfreq_hz,
        )
        g2[:, c, :] = clean + std * rng.standard_normal(clean.shape)
    return g2, lags
