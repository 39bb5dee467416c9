"""Forward model of DCS: semi-infinite correlation diffusion, Brownian motion, Siegert relation.

The field autocorrelation g1 measured at the surface of a homogeneous semi-infinite
turbid medium follows from the correlation diffusion equation (CDE) solved with the
extrapolated-zero boundary condition and one image source (Boas & Yodh 1997;
Durduran et al. 2010).  Scatterer motion is modelled as Brownian, mean square
displacement 6·Db·τ, and the product α·Db is reported as the blood-flow index BFi
in cm²/s.  The intensity autocorrelation follows from the Siegert relation
g2 = 1 + β·|g1|².

Defaults describe an adult head at 785 nm as one homogeneous medium; they are
orders of magnitude, not measurements (see :data:`ADULT_HEAD_DEFAULTS`).
"""

from __future__ import annotations

import math
from functools import lru_cache

import numpy as np
from scipy import integrate

__all__ = [
    "ADULT_HEAD_DEFAULTS",
    "OBSERVABLES",
    "effective_reflection",
    "extrapolation_length_cm",
    "wavenumber_per_cm",
    "g1_semi_infinite",
    "g2_from_g1",
    "g1_from_g2",
]

#: Default optical properties of an adult head treated as one homogeneous medium.
#: ``mua_per_cm`` 0.1 and ``musp_per_cm`` 10 at 785-850 nm: recalled from memory,
#: of the order given for scalp/skull/grey matter at 810 nm (grey matter μa≈0.28,
#: μs'≈8; skull μa≈0.11, μs'≈19 cm⁻¹; PMC6366475 Table 1, secondary).  ``n`` 1.4
#: for tissue: common practice.  ``wavelength_nm`` 785: a common DCS laser line
#: (common practice).  ``bfi_cm2_s`` 1e-8: typical adult brain BFi, roughly
#: 0.5-3e-8 cm²/s (recalled from memory).  ``beta`` 0.5: single-mode fibre
#: detecting unpolarised light (recalled from memory).
ADULT_HEAD_DEFAULTS: dict[str, float] = {
    "mua_per_cm": 0.1,
    "musp_per_cm": 10.0,
    "n": 1.4,
    "wavelength_nm": 785.0,
    "bfi_cm2_s": 1.0e-8,
    "beta": 0.5,
}

#: What the detector is taken to measure at the surface: the fluence rate Φ (the
#: usual CDE solution) or the diffuse flux (reflectance) D·∂Φ/∂z.
OBSERVABLES: tuple[str, ...] = ("fluence", "flux")


def _fresnel_unpolarised(theta: float, n: float) -> float:
    """Fresnel reflectance for unpolarised light leaving a medium of index n into air."""
    sin_t = n * math.sin(theta)
    if sin_t >= 1.0:
        return 1.0
    cos_i = math.cos(theta)
    cos_t = math.sqrt(1.0 - sin_t * sin_t)
    r_s = (n * cos_i - cos_t) / (n * cos_i + cos_t)
    r_p = (n * cos_t - cos_i) / (n * cos_t + cos_i)
    return 0.5 * (r_s * r_s + r_p * r_p)


@lru_cache(maxsize=64)
def _effective_reflection_scalar(n: float) -> float:
    if n == 1.0:
        return 0.0
    points = [math.asin(1.0 / n)] if n > 1.0 else None
    r_phi = integrate.quad(
        lambda t: 2.0 * math.sin(t) * math.cos(t) * _fresnel_unpolarised(t, n),
        0.0,
        math.pi / 2,
        points=points,
        epsabs=1e-13,
        epsrel=1e-12,
    )[0]
    r_j = integrate.quad(
        lambda t: 3.0 * math.sin(t) * math.cos(t) ** 2 * _fresnel_unpolarised(t, n),
        0.0,
        math.pi / 2,
        points=points,
        epsabs=1e-13,
        epsrel=1e-12,
    )[0]
    return (r_phi + r_j) / (2.0 - r_phi + r_j)


def effective_reflection(n: float) -> float:
    """Effective reflection coefficient Reff of a tissue-air boundary (unitless).

    Exact Fresnel-integral definition (not the polynomial approximation).

    Parameters
    ----------
    n : float
        Refractive index of the tissue relative to the outside medium (air).

    Returns
    -------
    float
        Reff = (Rφ + Rj) / (2 - Rφ + Rj), in [0, 1).

    Notes
    -----
    Rφ = ∫ 2 sinθ cosθ R_F(θ) dθ and Rj = ∫ 3 sinθ cos²θ R_F(θ) dθ over 0..π/2,
    with R_F the Fresnel reflectance of unpolarised light incident from inside
    (total internal reflection, R_F = 1, beyond the critical angle).  n = 1.4 gives
    0.4935.  The often-quoted polynomial -1.440/n² + 0.710/n + 0.668 + 0.0636 n
    gives 0.5295 at n = 1.4 and is not used here.

    References
    ----------
    Haskell et al. 1994, J Opt Soc Am A 11:2727 (recalled from memory).
    """
    n = float(n)
    if not n >= 1.0:
        raise ValueError(f"refractive index must be >= 1, got {n}")
    return _effective_reflection_scalar(n)


def extrapolation_length_cm(musp_per_cm, reff):
    """Extrapolation length zb of the extrapolated-zero boundary, in cm.

    zb = 2 (1 + Reff) / (3 μs' (1 - Reff)).

    Parameters
    ----------
    musp_per_cm : float or ndarray
        Reduced scattering coefficient μs' in 1/cm.
    reff : float or ndarray
        Effective reflection coefficient (unitless).
    """
    musp = np.asarray(musp_per_cm, dtype=float)
    reff = np.asarray(reff, dtype=float)
    return 2.0 * (1.0 + reff) / (3.0 * musp * (1.0 - reff))


def wavenumber_per_cm(wavelength_nm, n):
    """Wavenumber of the light inside the medium, k0 = 2π n / λ, in 1/cm."""
    return 2.0 * np.pi * np.asarray(n, dtype=float) / (np.asarray(wavelength_nm) * 1e-7)


def _geometry(separation_cm, mua_per_cm, musp_per_cm, n, wavelength_nm, reff):
    """Per-curve constants: r1, r2, z-positions, static K0², and the τ·BFi coefficient."""
    n_arr = np.asarray(n, dtype=float)
    if reff is None:
        if n_arr.ndim == 0:
            reff = effective_reflection(float(n_arr))
        else:
            reff = np.vectorize(effective_reflection, otypes=[float])(n_arr)
    musp = np.asarray(musp_per_cm, dtype=float)
    mua = np.asarray(mua_per_cm, dtype=float)
    rho = np.asarray(separation_cm, dtype=float)
    z0 = 1.0 / musp
    zb = extrapolation_length_cm(musp, reff)
    return _geometry_from_zb(rho, mua, musp, n_arr, wavelength_nm, z0, zb)


def _geometry_from_zb(rho, mua, musp, n, wavelength_nm, z0, zb):
    z_image = z0 + 2.0 * zb
    r1 = np.sqrt(rho**2 + z0**2)
    r2 = np.sqrt(rho**2 + z_image**2)
    k0 = wavenumber_per_cm(wavelength_nm, n)
    k_static_sq = 3.0 * mua * musp
    # K² = 3 μa μs' + μs'² k0² α<Δr²> with <Δr²> = 6 Db τ  ->  coefficient of BFi·τ:
    flow_coef = 6.0 * musp**2 * k0**2
    return {
        "r1": r1,
        "r2": r2,
        "z0": z0 + 0.0 * r1,
        "z_image": z_image + 0.0 * r1,
        "k_static_sq": k_static_sq,
        "flow_coef": flow_coef,
    }


def _surface_signal(k, geom, observable):
    """Unnormalised G1 at decay constant K (1/cm), up to a factor that cancels in g1.

    Returned as (scaled value, exponent) with value·exp(-exponent) the signal, so that
    normalisation never underflows.
    """
    r1, r2 = geom["r1"], geom["r2"]
    dr = r2 - r1
    tail = np.exp(-k * dr)
    if observable == "fluence":
        # [e^{-K r1}/r1 - e^{-K r2}/r2] = e^{-K r1} [1/r1 - e^{-K dr}/r2]
        value = 1.0 / r1 - tail / r2
    else:
        # flux: z0 (K + 1/r1) e^{-K r1}/r1² + z_image (K + 1/r2) e^{-K r2}/r2²
        value = (
            geom["z0"] * (k + 1.0 / r1) / r1**2 + geom["z_image"] * (k + 1.0 / r2) * tail / r2**2
        )
    return value, k * r1


def _dlog_signal_dk(k, geom, observable):
    """d log G1 / dK (cm), for the fitter's analytic Jacobian."""
    r1, r2 = geom["r1"], geom["r2"]
    tail = np.exp(-k * (r2 - r1))
    if observable == "fluence":
        value = 1.0 / r1 - tail / r2
        return -(1.0 - tail) / value
    a1 = geom["z0"] / r1**2
    a2 = geom["z_image"] * tail / r2**2
    value = a1 * (k + 1.0 / r1) + a2 * (k + 1.0 / r2)
    # d/dK [a (K + 1/r) e^{-K r}] = -a K r e^{-K r}
    return -k * (a1 * r1 + a2 * r2) / value


def _g1_core(bfi_tau, geom, observable):
    """g1 for products BFi·τ (cm²), with geometry arrays broadcast against them."""
    k = np.sqrt(geom["k_static_sq"] + geom["flow_coef"] * bfi_tau)
    k0 = np.sqrt(geom["k_static_sq"] + 0.0 * bfi_tau)
    value, expo = _surface_signal(k, geom, observable)
    value0, expo0 = _surface_signal(k0, geom, observable)
    return np.exp(-(expo - expo0)) * value / value0


def g1_semi_infinite(
    lags_s,
    bfi_cm2_s,
    *,
    separation_cm,
    mua_per_cm=0.1,
    musp_per_cm=10.0,
    n=1.4,
    wavelength_nm=785.0,
    reff=None,
    observable: str = "fluence",
) -> np.ndarray:
    """Normalised field autocorrelation g1(τ) on a semi-infinite homogeneous medium (unitless).

    Parameters
    ----------
    lags_s : array_like, shape (n_lags,)
        Correlation lags τ in seconds (>= 0).
    bfi_cm2_s : float or array_like, shape (n_curves,) or any shape
        Blood-flow index α·Db in cm²/s.
    separation_cm : float or array_like
        Source-detector separation ρ in cm; broadcast against ``bfi_cm2_s``.
    mua_per_cm : float or array_like, default=0.1
        Absorption coefficient μa in 1/cm; broadcast against ``bfi_cm2_s``.
    musp_per_cm : float or array_like, default=10.0
        Reduced scattering coefficient μs' in 1/cm; broadcast against ``bfi_cm2_s``.
    n : float, default=1.4
        Refractive index of tissue.
    wavelength_nm : float, default=785.0
        Laser wavelength in vacuum, nm.
    reff : float, optional
        Effective reflection coefficient.  ``None`` computes it from ``n`` with the exact
        Fresnel-integral definition (:func:`effective_reflection`; 0.4935 at n = 1.4).
    observable : {"fluence", "flux"}, default="fluence"
        ``"fluence"``: the CDE fluence at the surface (the usual DCS model).  ``"flux"``:
        the diffuse reflectance D·∂Φ/∂z at z = 0, with the same source and image.

    Returns
    -------
    ndarray, shape broadcast(bfi, separation, optics) + (n_lags,)
        g1 normalised so that g1(0) = 1; e.g. (n_curves, n_lags) for BFi of shape (n_curves,).

    Notes
    -----
    With K(τ)² = 3 μa μs' + 6 μs'² k0² BFi τ, k0 = 2π n / λ, z0 = 1/μs',
    zb = 2 (1 + Reff) / (3 μs' (1 - Reff)), r1 = √(ρ² + z0²), r2 = √(ρ² + (z0 + 2 zb)²):
    G1 ∝ e^{-K r1}/r1 - e^{-K r2}/r2 (fluence), and g1 = G1(τ)/G1(0).  g1 depends on
    BFi and τ only through their product.

    References
    ----------
    Boas & Yodh 1997, J Opt Soc Am A 14(1):192-215; Durduran et al. 2010, Rep Prog Phys
    73:076701 (formula recalled from memory; cross-checked numerically against the
    time-domain diffusion solution in the tests).
    """
    if observable not in OBSERVABLES:
        raise ValueError(f"observable must be one of {OBSERVABLES}, got {observable!r}")
    lags = np.asarray(lags_s, dtype=float)
    bfi = np.asarray(bfi_cm2_s, dtype=float)
    geom = _geometry(separation_cm, mua_per_cm, musp_per_cm, n, wavelength_nm, reff)
    shape = np.broadcast_shapes(bfi.shape, *(np.shape(v) for v in geom.values()))
    geom = {key: np.broadcast_to(v, shape)[..., None] for key, v in geom.items()}
    bfi_tau = np.broadcast_to(bfi, shape)[..., None] * lags
    return _g1_core(bfi_tau, geom, observable)


def g2_from_g1(g1, beta) -> np.ndarray:
    """Intensity autocorrelation from the Siegert relation, g2 = 1 + β |g1|² (unitless).

    Parameters
    ----------
    g1 : ndarray, shape (..., n_lags)
        Normalised field autocorrelation.
    beta : float or ndarray, shape (...,)
        Coherence factor β (0 < β <= 1) per curve; broadcast over the lag axis.

    Returns
    -------
    ndarray, shape (..., n_lags)

    References
    ----------
    Siegert relation, e.g. Durduran et al. 2010, Rep Prog Phys 73:076701.
    """
    g1 = np.asarray(g1, dtype=float)
    beta = np.asarray(beta, dtype=float)
    return 1.0 + beta[..., None] * np.abs(g1) ** 2


def g1_from_g2(g2, beta) -> np.ndarray:
    """Field autocorrelation magnitude from g2 by the Siegert relation, √((g2 - 1)/β).

    Negative values of g2 - 1 (noise) give NaN.

    Parameters
    ----------
    g2 : ndarray, shape (..., n_lags)
    beta : float or ndarray, shape (...,)

    Returns
    -------
    ndarray, shape (..., n_lags)
    """
    g2 = np.asarray(g2, dtype=float)
    beta = np.asarray(beta, dtype=float)[..., None]
    with np.errstate(invalid="ignore"):
        return np.sqrt((g2 - 1.0) / beta)
