"""Drift terms against scipy.fft.dct and numpy's Legendre polynomials."""

import numpy as np
from numpy.testing import assert_allclose
from scipy import fft

from fstats.design.drift import dct_drift, dct_order, polynomial_drift


def test_dct_order_worked_example():
    """Source: REFERENCE-CHECKS 2.5 - K = floor(2 N dt / Tc); N=3000, dt=0.1 s, Tc=128 s -> 4;
    every term's frequency k/(2 N dt) is at most 1/Tc."""
    assert dct_order(3000, 0.1, 128.0) == 4
    k = np.arange(1, 5)
    assert np.all(k / (2 * 3000 * 0.1) <= 1 / 128.0)
    assert dct_drift(3000, 0.1, 128.0).shape == (3000, 4)


def test_dct_columns_are_scipy_dct_basis_vectors():
    """Source: scipy.fft.idct(type=2, norm='ortho') of unit vector e_k is
    sqrt(2/N) cos(pi k (2n+1)/(2N)) for k >= 1."""
    n = 500
    cols = dct_drift(n, 0.5, 60.0)
    for k in range(1, cols.shape[1] + 1):
        e = np.zeros(n)
        e[k] = 1.0
        assert_allclose(
            cols[:, k - 1], fft.idct(e, type=2, norm="ortho") * np.sqrt(n / 2), atol=1e-12
        )


def test_projecting_out_dct_equals_zeroing_scipy_coefficients():
    """Source: REFERENCE-CHECKS 2.5 / 7.3 - removing constant + K cosines by least squares
    equals zeroing DCT-II (ortho) coefficients 0..K and inverting (computed max diff 2e-14)."""
    rng = np.random.default_rng(3)
    n, dt, tc = 3000, 0.1, 128.0
    y = rng.standard_normal(n).cumsum()
    x = np.column_stack([np.ones(n), dct_drift(n, dt, tc)])
    resid = y - x @ np.linalg.lstsq(x, y, rcond=None)[0]
    coef = fft.dct(y, type=2, norm="ortho")
    coef[: dct_order(n, dt, tc) + 1] = 0.0
    assert_allclose(resid, fft.idct(coef, type=2, norm="ortho"), atol=1e-10)


def test_dct_column_below_cutoff_removed_above_kept():
    """Source: REFERENCE-CHECKS 7.3 - DCT column k <= K is removed completely, column k > K
    passes unchanged (orthogonality, 1e-12)."""
    n, dt, tc = 1200, 0.1, 128.0
    k_max = dct_order(n, dt, tc)
    x = np.column_stack([np.ones(n), dct_drift(n, dt, tc)])
    idx = np.arange(n)
    for k, removed in ((k_max, True), (k_max + 1, False), (k_max + 5, False)):
        col = np.cos(np.pi * k * (2 * idx + 1) / (2 * n))
        resid = col - x @ np.linalg.lstsq(x, col, rcond=None)[0]
        assert_allclose(resid, 0.0 if removed else col, atol=1e-12)


def test_polynomial_drift_is_legendre():
    """Source: numpy.polynomial.legendre.Legendre.basis(k) on [-1, 1]."""
    n = 101
    cols = polynomial_drift(n, 3)
    x = np.linspace(-1, 1, n)
    for k in range(1, 4):
        assert_allclose(cols[:, k - 1], np.polynomial.legendre.Legendre.basis(k)(x), atol=1e-12)


def test_dct_leakage_matches_reference_values():
    """Source: REFERENCE-CHECKS 7.3 [computed] - with dt = 0.1 s and Tc = 128 s, a whole-cycle
    30 s sine keeps 99.6 %, 99.7 % and 99.9 % of its RMS for 300, 600 and 1200 s records."""
    for duration_s, kept in ((300, 0.996), (600, 0.997), (1200, 0.999)):
        n = int(round(duration_s / 0.1))
        t = np.arange(n) * 0.1
        y = np.sin(2 * np.pi * t / 30.0)
        x = np.column_stack([np.ones(n), dct_drift(n, 0.1, 128.0)])
        resid = y - x @ np.linalg.lstsq(x, y, rcond=None)[0]
        assert abs(np.sqrt(np.mean(resid**2) / np.mean(y**2)) - kept) < 0.0006
