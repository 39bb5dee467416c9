"""Tests of fstats.fit.filtering (block-Toeplitz FIR whitening and the filtered-design operator)."""

import numpy as np
import pytest
from numpy.testing import assert_allclose
from scipy.signal import lfilter

from fstats.fit.filtering import BlockFilter, FilteredRows


@pytest.mark.parametrize(("n", "order"), [(36000, 19), (1000, 0), (130, 5), (64, 3), (10, 3)])
def test_block_filter_equals_numpy_convolve(n, order):
    """Source: numpy.convolve(z, taps, mode="valid") - the block-Toeplitz matrix product
    computes the same FIR sums (rounding aside), also for series shorter than one block."""
    rng = np.random.default_rng(n + order)
    z = rng.standard_normal(n)
    taps = np.concatenate([[1.0], rng.standard_normal(order)])
    assert_allclose(BlockFilter(taps)(z), np.convolve(z, taps, mode="valid"), atol=1e-12)


@pytest.mark.parametrize("with_rows", [False, True])
def test_filtered_design_products_equal_the_whitened_rows(with_rows):
    """Source: scipy.signal.lfilter(b, [1], x) (the FIR whitening filter, first p samples
    dropped as in Cochrane-Orcutt) - the operator's X̃δ and X̃'v, computed from one
    filtered series each, equal the products with the explicitly whitened design, whether
    the products read the design's columns or a row copy of it."""
    rng = np.random.default_rng(21)
    n, k, p = 5000, 6, 19
    xrows = rng.standard_normal((k, n))
    coefs = rng.uniform(-0.1, 0.1, p)
    taps = np.concatenate([[1.0], -coefs])
    white = lfilter(taps, [1.0], xrows, axis=1)[:, p:]
    op = FilteredRows(
        np.ascontiguousarray(xrows.T), coefs, design_rows=xrows if with_rows else None
    )
    delta, v = rng.standard_normal(k), rng.standard_normal(n - p)
    assert_allclose(op.matvec(delta), white.T @ delta, atol=1e-11)
    assert_allclose(op.rmatvec(v), white @ v, rtol=1e-11, atol=1e-9)
    assert_allclose(op.materialize(), white, atol=1e-12)  # then the products use the rows
    assert_allclose(op.matvec(delta), white.T @ delta, atol=1e-11)
    assert_allclose(op.rmatvec(v), white @ v, rtol=1e-11, atol=1e-9)


@pytest.mark.parametrize(("n", "order", "width"), [(36000, 19, 36000), (100, 12, 95), (50, 3, 64)])
def test_filtered_columns_buffer_holds_lfilter_output_then_zeros(n, order, width):
    """Source: scipy.signal.lfilter(b, [1], x, axis=0) - every column of a design filtered at
    once into a zero-padded row buffer: its first n - p columns are the FIR output from sample
    p on, the rest are zero (ready for an FFT of that length)."""
    rng = np.random.default_rng(n)
    design = rng.standard_normal((n, 5))
    taps = np.concatenate([[1.0], rng.uniform(-0.2, 0.2, order)])
    out = BlockFilter(taps).columns(design, width=width)
    assert out.shape == (5, width)
    expected = lfilter(taps, [1.0], design, axis=0)[order:].T
    assert_allclose(out[:, : n - order], expected, atol=1e-12)
    assert np.all(out[:, n - order :] == 0.0)
    with pytest.raises(ValueError, match="shorter"):
        BlockFilter(taps).columns(design, width=n - order - 1)


@pytest.mark.parametrize(
    ("n", "order"), [(36000, 19), (60, 19), (5, 3), (1001, 80), (1000, 0), (1000, 12)]
)
def test_block_filter_full_equals_numpy_convolve_full(n, order):
    """Source: numpy.convolve(z, taps) (mode "full") - the adjoint filter's full output,
    the interior from the block product and both ends from short convolutions."""
    rng = np.random.default_rng(n + 1)
    z = rng.standard_normal(n)
    taps = np.concatenate([[1.0], rng.standard_normal(order) * 0.1])
    assert_allclose(BlockFilter(taps).full(z), np.convolve(z, taps), atol=1e-12)


def test_filtered_columns_in_single_precision_follow_lfilter():
    """Source: scipy.signal.lfilter(b, [1], x, axis=0) in double precision - a float32
    design is filtered in float32 (the cheap preconditioner's path): the output stays
    float32 and agrees with the double-precision FIR to single-precision rounding."""
    rng = np.random.default_rng(31)
    n, order = 4000, 19
    design = rng.standard_normal((n, 4))
    taps = np.concatenate([[1.0], rng.uniform(-0.2, 0.2, order)])
    out = BlockFilter(taps).columns(design.astype(np.float32), width=n)
    assert out.dtype == np.float32
    expected = lfilter(taps, [1.0], design, axis=0)[order:].T
    assert_allclose(out[:, : n - order], expected, rtol=0, atol=2e-5 * np.abs(expected).max())
    assert np.all(out[:, n - order :] == 0.0)


def test_preconditioner_approximates_the_weighted_whitened_gram():
    """Source: scipy.signal.lfilter (explicitly whitened rows) - the single-precision
    X̃'WX̃ behind the first IRLS factor agrees with the double-precision Gram of the
    whitened rows to about 1e-6 relative, and a design too ill-conditioned for single
    precision gets no preconditioner (None: the caller then forms the exact factor)."""
    rng = np.random.default_rng(32)
    n, p = 6000, 12
    coefs = rng.uniform(-0.1, 0.1, p)
    taps = np.concatenate([[1.0], -coefs])
    t = np.arange(n) / n
    design = np.column_stack([np.ones(n), t, rng.standard_normal((n, 3))])
    weights = rng.uniform(0.0, 1.0, n - p)
    op = FilteredRows(design, coefs)
    normal = op.preconditioner(weights)
    white = lfilter(taps, [1.0], design, axis=0)[p:]
    exact = white.T @ (weights[:, None] * white)
    assert normal is not None
    assert_allclose(normal.inverse(), np.linalg.inv(exact), rtol=1e-4)
    assert op._white is None  # the double-precision rows were not formed for it
    near = np.column_stack([design, design[:, 2] + 1e-4 * rng.standard_normal(n)])
    assert FilteredRows(near, coefs).preconditioner(weights[: n - p]) is None
