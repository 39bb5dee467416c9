"""Tests of fstats.fit.whitener (FFT whitening of series with gaps, Gram from the spectrum)."""

import numpy as np
import pytest
from numpy.testing import assert_allclose

from fstats.fit.autoregressive import whiten, whitened_rows
from fstats.fit.whitener import Whitener


@pytest.mark.parametrize("n", [600, 601])
@pytest.mark.parametrize("order", [0, 1, 19])
def test_whitener_gram_matches_whitened_rows(n, order):
    """Source: Parseval's theorem - the Gram matrix of the circularly filtered series equals
    the one-sided spectral sum; after removing the dropped samples (first p, after gaps, the
    padding tail; n=601 pads to a fast FFT length) it equals W W' of the whitened rows."""
    rng = np.random.default_rng(order + n)
    rows = rng.standard_normal((4, n))
    valid = np.ones(n, bool)
    valid[[0, 1, 250, 251, 252, 400, n - 1]] = False
    rows[:, ~valid] = np.nan
    whitener = Whitener(rows, valid)
    coefs = rng.uniform(-0.2, 0.2, order)
    white = whitener.apply(coefs)
    assert white.shape[1] == whitened_rows(valid, order).sum()
    direct = whiten(rows.T, coefs, valid).T
    assert_allclose(white, direct, rtol=1e-10, atol=1e-12)
    gram = whitener.gram(coefs, max_dropped=1.0)
    assert_allclose(gram, white @ white.T, rtol=1e-11, atol=1e-11)
    if order > 5:  # too many samples to correct: the caller is told to whiten instead
        assert whitener.gram(coefs, max_dropped=0.01) is None


@pytest.mark.parametrize(("n", "order"), [(600, 19), (600, 0), (599, 4)])
def test_kept_spectrum_is_the_dft_of_the_whitened_rows(n, order):
    """Source: scipy.fft.rfft and the DFT shift theorem - the spectrum of the kept whitened
    samples derived from the stored product (minus the dropped samples' Fourier sums) equals
    the FFT of the whitened rows zero-padded to the same length, times the phase of a shift
    by p samples; with gaps, or on another FFT grid, there is none."""
    from scipy import fft

    rng = np.random.default_rng(n + order)
    rows = rng.standard_normal((4, n))
    coefs = rng.uniform(-0.2, 0.2, order)
    whitener = Whitener(rows, np.ones(n, bool))
    white = whitener.apply(coefs)
    spectrum = whitener.kept_spectrum(coefs)
    if fft.next_fast_len(n - order, real=True) != whitener.n_fft:
        assert spectrum is None
        return
    ref = fft.rfft(white[1:], n=whitener.n_fft, axis=1)
    shift = np.exp(-2j * np.pi * np.arange(ref.shape[1]) * order / whitener.n_fft)
    assert_allclose(spectrum, ref * shift, atol=1e-10 * np.abs(ref).max())
    if order:
        assert whitener.kept_spectrum(coefs + 0.01) is None  # not the last filter applied
    valid = np.ones(n, bool)
    valid[100] = False
    gappy = Whitener(rows, valid)
    gappy.apply(coefs)
    assert gappy.kept_spectrum(coefs) is None


@pytest.mark.parametrize("n", [600, 601, 599])
def test_whitener_gram_without_gaps_matches_whitened_rows(n):
    """Source: Parseval's theorem (as above) - without gaps only the first p samples and
    the first p of the zero padding are corrected; the result is W W' of the rows."""
    rng = np.random.default_rng(n)
    rows = rng.standard_normal((3, n))
    coefs = rng.uniform(-0.2, 0.2, 19)
    whitener = Whitener(rows, np.ones(n, bool))
    white = whitener.apply(coefs)
    assert_allclose(whitener.gram(coefs), white @ white.T, rtol=1e-11, atol=1e-11)
