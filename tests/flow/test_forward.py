"""Tests of fstats/flow/forward.py: semi-infinite correlation diffusion and Siegert relation."""

import numpy as np
import pytest
from numpy.testing import assert_allclose
from scipy import integrate, optimize

from fstats.flow.forward import (
    effective_reflection,
    extrapolation_length_cm,
    g1_from_g2,
    g1_semi_infinite,
    g2_from_g1,
    wavenumber_per_cm,
)

C_CM_S = 2.99792458e10  # speed of light in vacuum, cm/s


def test_g1_is_one_at_zero_lag_and_decays_monotonically():
    """Source: Boas & Yodh 1997, JOSA A 14:192 (REFERENCE-CHECKS 5.1): g1(0)=1, decreasing."""
    lags = np.concatenate([[0.0], np.geomspace(1e-8, 1e-2, 400)])
    g1 = g1_semi_infinite(lags, 1e-8, separation_cm=2.5)
    assert g1[0] == pytest.approx(1.0, abs=1e-15)
    assert np.all(np.diff(g1) < 0)
    assert g1[-1] < 1e-6


def test_larger_separation_decays_faster():
    """Source: REFERENCE-CHECKS 5.1 - longer photon paths accumulate more phase, faster decay."""
    lags = np.geomspace(1e-7, 1e-3, 50)
    g1 = g1_semi_infinite(lags, 1e-8, separation_cm=np.array([[1.0], [2.0], [3.0], [4.0]]))
    assert g1.shape == (4, 1, 50)
    assert np.all(np.diff(g1[:, 0, :], axis=0) < 0)


@pytest.mark.parametrize("rho_cm, tau_e_us", [(1.0, 84.5), (2.5, 24.9), (3.0, 19.8)])
def test_one_over_e_decay_time_regression(rho_cm, tau_e_us):
    """Source: REFERENCE-CHECKS 5.1 [computed] - 1/e time of g1 for mua 0.1, musp 10 /cm,
    n 1.4, 785 nm, Reff 0.493, BFi 1e-8 cm2/s (values given to 3 significant figures)."""

    def excess(tau):
        return g1_semi_infinite([tau], 1e-8, separation_cm=rho_cm, reff=0.493)[0] - np.exp(-1)

    tau_e = optimize.brentq(excess, 1e-7, 1e-3, xtol=1e-12)
    assert tau_e * 1e6 == pytest.approx(tau_e_us, abs=0.06)


def test_derived_constants_regression():
    """Source: REFERENCE-CHECKS 5.1 [computed]: k0 = 2 pi n/lambda = 1.121e5 /cm; zb = 0.1963 cm."""
    assert wavenumber_per_cm(785.0, 1.4) == pytest.approx(1.121e5, rel=5e-4)
    assert extrapolation_length_cm(10.0, 0.493) == pytest.approx(0.1963, abs=5e-5)


@pytest.mark.parametrize(
    "n, reff", [(1.33, 0.4311), (1.37, 0.4679), (1.40, 0.4935), (1.44, 0.5251)]
)
def test_effective_reflection_exact_fresnel(n, reff):
    """Source: REFERENCE-CHECKS 5.5 [computed] - exact Fresnel-integral Reff; fstats documents
    this definition (not the polynomial, which gives 0.5295 at n = 1.4)."""
    assert effective_reflection(n) == pytest.approx(reff, abs=5e-4)


def test_effective_reflection_boundary_factor():
    """Source: REFERENCE-CHECKS 5.5 - A = (1 + Reff)/(1 - Reff) = 2.948 at n = 1.4 (secondary)."""
    r = effective_reflection(1.4)
    assert (1 + r) / (1 - r) == pytest.approx(2.948, abs=2e-3)
    assert effective_reflection(1.0) == 0.0


def test_default_reff_is_the_fresnel_value():
    """Source: REFERENCE-CHECKS 5.5 - reff=None uses the exact definition for the given n."""
    lags = np.geomspace(1e-7, 1e-3, 30)
    assert_allclose(
        g1_semi_infinite(lags, 2e-8, separation_cm=3.0),
        g1_semi_infinite(lags, 2e-8, separation_cm=3.0, reff=effective_reflection(1.4)),
        rtol=1e-14,
    )


def _time_domain_g1(lags_s, bfi, rho, *, mua, musp, n, wavelength_nm, kernel, zb):
    """g1 by integrating a time-domain diffusion solution over the time of flight.

    Each path of length s = v t is weighted by exp(-(1/3) k0^2 musp <dr^2> s) with
    <dr^2> = 6 BFi tau, i.e. exp(-2 k0^2 musp BFi tau v t).  Quadrature in log t.
    """
    v = C_CM_S / n
    d = 1.0 / (3.0 * musp)  # same D as the CDE (REFERENCE-CHECKS 5.7: like for like)
    z0 = 1.0 / musp
    r1sq = rho**2 + z0**2
    r2sq = rho**2 + (z0 + 2 * zb) ** 2
    k0 = 2 * np.pi * n / (wavelength_nm * 1e-7)

    def fluence(t):
        return (
            v
            * (4 * np.pi * d * v * t) ** -1.5
            * np.exp(-mua * v * t)
            * (np.exp(-r1sq / (4 * d * v * t)) - np.exp(-r2sq / (4 * d * v * t)))
        )

    def reflectance(t):
        # extrapolated-boundary flux; zb = 0 gives Patterson, Chance & Wilson (1989) eq. for R
        return (
            0.5
            * (4 * np.pi * d * v) ** -1.5
            * t**-2.5
            * np.exp(-mua * v * t)
            * (
                z0 * np.exp(-r1sq / (4 * d * v * t))
                + (z0 + 2 * zb) * np.exp(-r2sq / (4 * d * v * t))
            )
        )

    signal = fluence if kernel == "fluence" else reflectance

    def total(tau):
        def integrand(log_t):
            t = np.exp(log_t)
            return signal(t) * np.exp(-2 * k0**2 * musp * bfi * tau * v * t) * t

        return integrate.quad(
            integrand, np.log(1e-14), np.log(1e-6), limit=400, epsabs=0.0, epsrel=1e-11
        )[0]

    norm = total(0.0)
    return np.array([total(tau) / norm for tau in lags_s])


@pytest.mark.parametrize("rho_cm", [1.0, 2.5, 3.0])
def test_closed_form_matches_time_domain_fluence(rho_cm):
    """Source: Patterson, Chance & Wilson 1989, Appl Opt 28:2331, time-domain diffusion
    solution with the extrapolated boundary (REFERENCE-CHECKS 5.6), weighted by the
    Brownian phase decay and integrated over time of flight (scipy.integrate.quad, log t)."""
    optics = {"mua": 0.1, "musp": 10.0, "n": 1.4, "wavelength_nm": 785.0}
    reff = effective_reflection(1.4)
    zb = float(extrapolation_length_cm(10.0, reff))
    lags = np.concatenate([[0.0], np.geomspace(1e-7, 3e-4, 12)])
    numeric = _time_domain_g1(lags, 1.5e-8, rho_cm, kernel="fluence", zb=zb, **optics)
    closed = g1_semi_infinite(lags, 1.5e-8, separation_cm=rho_cm, mua_per_cm=0.1, musp_per_cm=10.0)
    assert_allclose(closed, numeric, rtol=1e-3, atol=1e-7)
    assert np.max(np.abs(closed - numeric)) < 1e-6  # in fact far closer than the 1e-3 asked


@pytest.mark.parametrize("rho_cm", [1.0, 2.5])
def test_flux_form_matches_patterson_reflectance(rho_cm):
    """Source: Patterson, Chance & Wilson 1989, Appl Opt 28:2331 - time-resolved diffuse
    reflectance R(rho, t) for a zero boundary (REFERENCE-CHECKS 5.7), weighted by the Brownian
    phase decay and integrated over time; equals the flux observable with zb = 0 (reff = -1)."""
    optics = {"mua": 0.1, "musp": 10.0, "n": 1.4, "wavelength_nm": 785.0}
    lags = np.concatenate([[0.0], np.geomspace(1e-7, 3e-4, 10)])
    numeric = _time_domain_g1(lags, 1e-8, rho_cm, kernel="reflectance", zb=0.0, **optics)
    closed = g1_semi_infinite(lags, 1e-8, separation_cm=rho_cm, reff=-1.0, observable="flux")
    assert_allclose(closed, numeric, rtol=1e-3, atol=1e-7)


def test_extrapolated_flux_matches_time_domain_reflectance():
    """Source: extrapolated-boundary time-resolved reflectance (two image terms; Patterson,
    Chance & Wilson 1989 form extended by an image at z0 + 2 zb), integrated over time."""
    reff = effective_reflection(1.4)
    zb = float(extrapolation_length_cm(10.0, reff))
    lags = np.concatenate([[0.0], np.geomspace(1e-7, 2e-4, 8)])
    numeric = _time_domain_g1(
        lags, 1e-8, 3.0, mua=0.1, musp=10.0, n=1.4, wavelength_nm=785.0, kernel="flux", zb=zb
    )
    closed = g1_semi_infinite(lags, 1e-8, separation_cm=3.0, observable="flux")
    assert_allclose(closed, numeric, rtol=1e-3, atol=1e-7)


def test_fluence_and_zero_boundary_flux_differ_as_documented():
    """Source: REFERENCE-CHECKS 5.7 [computed] - rho 1 cm, tau 100 us: 0.316 (extrapolated
    fluence, Reff 0.493) vs 0.340 (zero-boundary flux); rho 2.5 cm, 30 us: 0.306 vs 0.310."""
    for rho, tau, fluence, flux in [(1.0, 100e-6, 0.316, 0.340), (2.5, 30e-6, 0.306, 0.310)]:
        a = g1_semi_infinite([tau], 1e-8, separation_cm=rho, reff=0.493)[0]
        b = g1_semi_infinite([tau], 1e-8, separation_cm=rho, reff=-1.0, observable="flux")[0]
        assert a == pytest.approx(fluence, abs=6e-4)
        assert b == pytest.approx(flux, abs=6e-4)


def test_g1_depends_on_bfi_times_lag_only():
    """Source: REFERENCE-CHECKS 5.2 - K^2 = 3 mua musp + 6 musp^2 k0^2 BFi tau."""
    lags = np.geomspace(1e-7, 1e-3, 40)
    assert_allclose(
        g1_semi_infinite(lags, 2e-8, separation_cm=2.5),
        g1_semi_infinite(2 * lags, 1e-8, separation_cm=2.5),
        rtol=1e-12,
    )


def test_broadcast_over_curves_matches_loop():
    """Source: common practice - the batched evaluation equals curve-by-curve evaluation."""
    rng = np.random.default_rng(3)
    lags = np.geomspace(1e-7, 1e-2, 60)
    bfi = rng.uniform(0.5e-8, 3e-8, 7)
    rho = rng.uniform(1.0, 3.5, 7)
    batch = g1_semi_infinite(lags, bfi, separation_cm=rho)
    loop = np.stack(
        [g1_semi_infinite(lags, b, separation_cm=r) for b, r in zip(bfi, rho, strict=True)]
    )
    assert batch.shape == (7, 60)
    assert_allclose(batch, loop, rtol=1e-13)


def test_no_underflow_at_long_lags_and_large_separation():
    """Source: common practice - g1 stays finite and non-negative far out on the tail."""
    g1 = g1_semi_infinite(np.geomspace(1e-6, 1.0, 50), 5e-8, separation_cm=5.0)
    assert np.all(np.isfinite(g1)) and np.all(g1 >= 0)


def test_siegert_relation_and_inverse():
    """Source: Siegert relation g2 = 1 + beta |g1|^2 (REFERENCE-CHECKS 5.3): g2(0) - 1 = beta."""
    lags = np.concatenate([[0.0], np.geomspace(1e-7, 1e-3, 20)])
    g1 = g1_semi_infinite(lags, np.array([1e-8, 2e-8]), separation_cm=3.0)
    beta = np.array([0.5, 0.42])
    g2 = g2_from_g1(g1, beta)
    assert_allclose(g2[:, 0] - 1.0, beta, rtol=1e-14)
    assert_allclose(g2, 1 + beta[:, None] * g1**2, rtol=1e-14)
    assert_allclose(g1_from_g2(g2, beta), g1, rtol=1e-6, atol=1e-7)  # sqrt of rounding
    assert np.isnan(g1_from_g2(np.array([0.9]), 0.5)[0])
