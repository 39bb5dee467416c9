"""Response functions (kernels) that turn a stimulus time course into a regressor.

Every function here is pure: it takes post-onset times in seconds and returns the
kernel's values there.  The kernels are returned unnormalised, exactly as published;
:func:`response_kernel` samples one on a regular grid and scales it to unit area
(``sum(h) * dt == 1``) so that a long block convolved with it plateaus at 1.
"""

from __future__ import annotations

import math

import numpy as np
from scipy import special

__all__ = [
    "RESPONSE_MODELS",
    "FLOW_PEAK_S",
    "FLOW_SHAPE",
    "glover_hrf",
    "canonical_hrf",
    "gamma_variate",
    "response_kernel",
    "kernel_length_s",
]

#: Response models a design may name (``conditions.<name>.response.model``).
RESPONSE_MODELS: tuple[str, ...] = ("flow", "gamma_variate", "glover", "canonical", "boxcar", "fir")

#: Peak time (s) of the default flow response: a gamma variate peaking 1 s before the
#: canonical double gamma (5.0 s), since CBF leads BOLD by about 1 s (see notes).
FLOW_PEAK_S: float = 4.0
#: Gamma shape of the default flow response (FWHM of a 1-s response about 5.5 s).
FLOW_SHAPE: float = 4.0


def glover_hrf(
    times_s: np.ndarray,
    *,
    a1: float = 6.0,
    a2: float = 12.0,
    b1_s: float = 0.9,
    b2_s: float = 0.9,
    c: float = 0.35,
) -> np.ndarray:
    """Glover's (1999) double-gamma haemodynamic response, unnormalised.

    Parameters
    ----------
    times_s : ndarray, shape (n,)
        Time after the impulse in seconds; negative times give 0.
    a1, a2 : float
        Shape exponents of the positive lobe and the undershoot.
    b1_s, b2_s : float
        Time constants (s) of the two terms.
    c : float
        Relative size of the undershoot.

    Returns
    -------
    ndarray, shape (n,)
        h(t) = (t/d1)^a1 exp(-(t-d1)/b1) - c (t/d2)^a2 exp(-(t-d2)/b2), d_i = a_i b_i.
        Each term peaks at 1 at t = d_i; the sum peaks at 5.24 s for the defaults.

    References
    ----------
    Glover GH (1999) Deconvolution of impulse response in event-related BOLD fMRI.
    NeuroImage 9(4):416-429.
    """
    t = np.asarray(times_s, dtype=float)
    pos = np.clip(t, 0.0, None)
    d1, d2 = a1 * b1_s, a2 * b2_s
    with np.errstate(divide="ignore"):
        first = np.exp(a1 * np.log(pos / d1) - (pos - d1) / b1_s)
        second = np.exp(a2 * np.log(pos / d2) - (pos - d2) / b2_s)
    out = first - c * second
    return np.where(t > 0.0, out, 0.0)


def _gamma_pdf(t: np.ndarray, shape: float, scale: float) -> np.ndarray:
    pos = np.clip(t, 0.0, None)
    with np.errstate(divide="ignore"):
        log_pdf = (shape - 1.0) * np.log(pos / scale) - pos / scale - special.gammaln(shape)
    return np.where(t > 0.0, np.exp(log_pdf) / scale, 0.0)


def canonical_hrf(
    times_s: np.ndarray,
    *,
    rise_shape: float = 6.0,
    undershoot_shape: float = 16.0,
    scale_s: float = 1.0,
    ratio: float = 1.0 / 6.0,
) -> np.ndarray:
    """The common canonical double gamma: G(t; 6, 1) - G(t; 16, 1)/6, unnormalised.

    Parameters
    ----------
    times_s : ndarray, shape (n,)
        Time after the impulse in seconds; negative times give 0.
    rise_shape, undershoot_shape : float
        Gamma shape parameters of the positive lobe and the undershoot.  With
        scale 1 s these are the lobes' mean times, not their peaks: the curve
        peaks at 5.0 s and has its minimum at 15.75 s.
    scale_s : float
        Gamma scale (s) of both terms.
    ratio : float
        Undershoot size relative to the positive lobe.

    Returns
    -------
    ndarray, shape (n,)
        Difference of gamma densities; its integral over 0..inf is 1 - ratio.

    References
    ----------
    Friston KJ et al. (1998) Event-related fMRI: characterizing differential
    responses. NeuroImage 7:30-40 (basis set; parameters as commonly used).
    """
    t = np.asarray(times_s, dtype=float)
    return _gamma_pdf(t, rise_shape, scale_s) - ratio * _gamma_pdf(t, undershoot_shape, scale_s)


def gamma_variate(
    times_s: np.ndarray,
    *,
    peak_s: float = FLOW_PEAK_S,
    shape: float = FLOW_SHAPE,
    lag_s: float = 0.0,
) -> np.ndarray:
    """A single gamma-variate response parametrised by its peak time, unit area.

    Parameters
    ----------
    times_s : ndarray, shape (n,)
        Time after the impulse in seconds.
    peak_s : float, default=FLOW_PEAK_S
        Time of the maximum in seconds (must exceed ``lag_s``).
    shape : float, default=FLOW_SHAPE
        Gamma shape n (> 1); larger is narrower relative to the peak time.
    lag_s : float, default=0
        Pure delay δ (s) before the response starts.

    Returns
    -------
    ndarray, shape (n,)
        h(t) = ((t-δ)/τ)^(n-1) exp(-(t-δ)/τ) / (τ Γ(n)) for t > δ, else 0, with
        τ = (peak_s - δ)/(n - 1) so that the mode δ + (n-1)τ equals ``peak_s``.
        This is the gamma density with shape n, scale τ and location δ (area 1).

    References
    ----------
    Boynton GM, Engel SA, Glover GH, Heeger DJ (1996) Linear systems analysis of
    functional magnetic resonance imaging in human V1. J Neurosci 16:4207-4221.
    """
    if shape <= 1.0 or peak_s <= lag_s:
        raise ValueError("gamma_variate needs shape > 1 and peak_s > lag_s")
    tau = (peak_s - lag_s) / (shape - 1.0)
    return _gamma_pdf(np.asarray(times_s, dtype=float) - lag_s, shape, tau)


def kernel_length_s(model: str, params: dict) -> float:
    """Support (s) over which a response model is sampled.

    Parameters
    ----------
    model : str
        One of :data:`RESPONSE_MODELS`.
    params : dict
        The model's parameters (as for :func:`response_kernel`).

    Returns
    -------
    float
        32 s for the double gammas, enough for the gamma variate to fall below
        1e-6 of its peak, the bin span for FIR, 0 for a boxcar.
    """
    if model in ("glover", "canonical"):
        return 32.0
    if model in ("flow", "gamma_variate"):
        peak = params.get("peak_s", FLOW_PEAK_S)
        shape = params.get("shape", FLOW_SHAPE)
        lag = params.get("lag_s", 0.0)
        tau = (peak - lag) / (shape - 1.0)
        # the gamma tail beyond mean + 12 sd is negligible (< 1e-6 of the peak)
        return float(lag + shape * tau + 12.0 * math.sqrt(shape) * tau)
    if model == "fir":
        return float(params["bin_s"] * params["n_bins"])
    return 0.0


def response_kernel(model: str, params: dict, step_s: float) -> np.ndarray:
    """A response model sampled at 0, step, 2 step, ... and scaled to unit area.

    Parameters
    ----------
    model : {"flow", "gamma_variate", "glover", "canonical"}
        Response model (``"flow"`` is the gamma variate with the flow defaults).
    params : dict
        Keyword parameters of the model function (e.g. ``peak_s``, ``shape``).
    step_s : float
        Sample step in seconds.

    Returns
    -------
    ndarray, shape (n_kernel,)
        Kernel with ``sum(h) * step_s == 1``.
    """
    times = np.arange(0.0, kernel_length_s(model, params) + step_s / 2, step_s)
    if model == "glover":
        values = glover_hrf(times, **params)
    elif model == "canonical":
        values = canonical_hrf(times, **params)
    elif model in ("flow", "gamma_variate"):
        values = gamma_variate(times, **params)
    else:
        raise ValueError(f"no sampled kernel for response model {model!r}")
    return values / (values.sum() * step_s)
