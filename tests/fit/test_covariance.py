"""Tests of fstats.fit.covariance (frequency-domain sandwich, Satterthwaite df)."""

import numpy as np
import pytest
from numpy.testing import assert_allclose
from scipy import fft

from fstats.fit.covariance import spectral_sandwich
from fstats.fit.robust import weighted_least_squares


def _design(n, rng):
    t = np.arange(n)
    block = ((t // 200) % 2).astype(float)
    return np.column_stack([np.ones(n), block, rng.standard_normal(n)])


def test_leverage_sums_to_number_of_columns():
    """Source: closed form - the hat matrix has trace k; in the Fourier basis its diagonal
    sums (over the two-sided grid, divided by n) to the same trace."""
    rng = np.random.default_rng(0)
    n = 1024
    x = _design(n, rng)
    _, inv = weighted_least_squares(np.zeros(n), x)
    sc = spectral_sandwich(x, rng.standard_normal(n), np.ones(n), inv, smoothing_bins=3)
    n_fft = fft.next_fast_len(n, real=True)
    side = np.full(n_fft // 2 + 1, 2.0)
    side[0] = 1.0
    side[-1] = 1.0 if n_fft % 2 == 0 else 2.0
    assert_allclose(np.sum(side * (1.0 - sc.adjust)), x.shape[1], rtol=1e-8)


def test_white_noise_sandwich_matches_ols_variance_on_average():
    """Source: closed form - for white noise the sandwich equals sigma^2 (X'X)^-1 in
    expectation; averaged over 200 draws the ratio is 1 within Monte-Carlo error."""
    rng = np.random.default_rng(1)
    n = 2000
    x = _design(n, rng)
    ratios, dofs = [], []
    for _ in range(200):
        y = rng.standard_normal(n)
        betas, inv = weighted_least_squares(y, x)
        resid = y - x @ betas
        sc = spectral_sandwich(x, resid, np.ones(n), inv, smoothing_bins=10)
        model = inv * (resid @ resid) / (n - 3)
        ratios.append(sc.cov[1, 1] / model[1, 1])
        dofs.append(sc.contrast_dof(np.array([0.0, 1.0, 0.0])))
    assert abs(np.mean(ratios) - 1.0) < 0.05
    # a block regressor's information sits in a few low-frequency bins: few df
    assert 10 < np.median(dofs) < 200


def test_sandwich_catches_slow_noise_the_model_variance_misses():
    """Source: common practice (HAC/sandwich) - with low-frequency noise left in the
    residuals, the Monte-Carlo variance of the block estimate exceeds the model-based
    variance, and the spectral estimate tracks the Monte-Carlo value (within 30 %)."""
    rng = np.random.default_rng(2)
    n = 4000
    x = _design(n, rng)
    freqs = fft.rfftfreq(n)
    amp = np.where(freqs > 0, 1.0 / np.sqrt(np.maximum(freqs, 1e-4)), 0.0)
    est, model_var, spec_var = [], [], []
    for _ in range(300):
        noise = fft.irfft(
            amp * (rng.standard_normal(freqs.size) + 1j * rng.standard_normal(freqs.size)), n=n
        )
        y = noise / noise.std() * 0.5 + rng.standard_normal(n)
        betas, inv = weighted_least_squares(y, x)
        resid = y - x @ betas
        est.append(betas[1])
        model_var.append((inv * (resid @ resid) / (n - 3))[1, 1])
        spec_var.append(spectral_sandwich(x, resid, np.ones(n), inv, smoothing_bins=4).cov[1, 1])
    true_var = np.var(est)
    assert true_var > 2.0 * np.mean(model_var)
    assert abs(np.mean(spec_var) / true_var - 1.0) < 0.3


def test_sandwich_matches_its_closed_form_computed_directly():
    """Source: closed form (module docstring) - B [sum_f V^H V S(f)] B with V = DFT(X B),
    S the leverage-adjusted Daniell-smoothed periodogram of psi = w e, computed here with
    plain complex arithmetic on the (n_freqs, k) spectra; covariance to 1e-12 and the
    Satterthwaite df 2 (sum a E I)^2 / sum (a E I)^2 to 1e-10."""
    rng = np.random.default_rng(4)
    n, m = 1500, 6
    x = _design(n, rng)
    e = rng.standard_normal(n)
    w = rng.uniform(0.2, 1.0, n)
    inv = np.linalg.inv(x.T @ (x * w[:, None]))
    bread = np.linalg.inv(x.T @ (x * (0.9 * w)[:, None]))
    sc = spectral_sandwich(x, e, w, inv, smoothing_bins=m, bread=bread)
    n_fft = fft.next_fast_len(n, real=True)
    side = np.full(n_fft // 2 + 1, 2.0)
    side[0] = 1.0
    side[-1] = 1.0 if n_fft % 2 == 0 else 2.0
    v = fft.rfft(x @ bread, n=n_fft, axis=0) * np.sqrt(side / n_fft)[:, None]
    g = fft.rfft(x * np.sqrt(w)[:, None], n=n_fft, axis=0)
    adjust = np.clip(1.0 - np.real(np.sum((g @ inv) * np.conj(g), axis=1)) / n, 0.0, 1.0)
    kernel = np.ones(2 * m + 1)

    def smooth(values):
        padded = np.concatenate([values[m:0:-1], values, values[-2 : -m - 2 : -1]])
        return np.convolve(padded, kernel, mode="valid")

    denom = np.maximum(smooth(adjust), 0.1 * (2 * m + 1))
    noise = smooth(np.abs(fft.rfft(w * e, n=n_fft)) ** 2 / n) / denom
    cov = np.real(v.conj().T @ (v * noise[:, None]))
    assert_allclose(sc.cov, 0.5 * (cov + cov.T), rtol=1e-12, atol=1e-12 * np.abs(cov).max())
    assert_allclose(sc.design_spectrum, v, rtol=1e-12, atol=1e-12 * np.abs(v).max())
    c = np.array([0.0, 1.0, 0.0])
    terms = smooth(np.abs(v @ c) ** 2 / denom) * noise * adjust
    dof = (n / n_fft) * 2.0 * terms.sum() ** 2 / np.sum(terms**2)
    assert_allclose(sc.contrast_dof(c), dof, rtol=1e-10)


def test_sandwich_is_invariant_to_a_shift_of_the_design_spectrum():
    """Source: the DFT shift theorem (a delay multiplies every series' DFT by the same
    unit-modulus factor) - handing in DFT(X̃) times such a factor gives the covariance and
    the contrast degrees of freedom computed from the rows."""
    from scipy import fft

    rng = np.random.default_rng(8)
    n, k = 1200, 4
    x = np.column_stack([np.ones(n), rng.standard_normal((n, k - 1)).cumsum(axis=0) / 30])
    e = rng.standard_normal(n)
    w = rng.uniform(0.5, 1.0, n)
    inv = np.linalg.inv(x.T @ (w[:, None] * x))
    n_fft = fft.next_fast_len(n, real=True)
    phase = np.exp(-2j * np.pi * np.arange(n_fft // 2 + 1) * 7 / n_fft)
    given = fft.rfft(x.T, n=n_fft, axis=1) * phase
    ref = spectral_sandwich(x, e, w, inv, smoothing_bins=5)
    ours = spectral_sandwich(x, e, w, inv, smoothing_bins=5, design_fft=given)
    assert_allclose(ours.cov, ref.cov, rtol=1e-10)
    c = np.array([0.0, 1.0, -1.0, 0.0])
    assert ours.contrast_dof(c) == pytest.approx(ref.contrast_dof(c), rel=1e-10)
