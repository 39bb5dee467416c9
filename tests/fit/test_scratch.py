"""Tests of fstats.fit.scratch (per-thread scratch buffers) and that fits never leak them."""

import threading

import numpy as np
from numpy.testing import assert_array_equal

from fstats.fit import scratch as scratch_module
from fstats.fit.estimation import estimate_channel
from fstats.fit.scratch import release_scratch, scratch


def test_scratch_reuses_one_buffer_per_name_and_grows():
    """A second request with the same name shares the first one's memory; a larger
    request gets a new, larger buffer; other names and dtypes get the right views."""
    release_scratch()
    a = scratch("a", (3, 4))
    assert a.shape == (3, 4) and a.dtype == np.float64 and a.flags.c_contiguous
    b = scratch("a", (2, 5))
    assert np.shares_memory(a, b)
    c = scratch("a", (10, 10))
    assert not np.shares_memory(a, c) and c.shape == (10, 10)
    z = scratch("z", (4,), complex)
    assert z.dtype == np.complex128 and not np.shares_memory(z, c)
    release_scratch()
    assert not np.shares_memory(scratch("a", (2, 5)), c)


def test_scratch_keeps_no_more_than_the_limit(monkeypatch):
    """A request that would take the thread's buffers past the limit gets a fresh array
    that is not kept (the next request does not share it); smaller ones are still kept."""
    monkeypatch.setattr(scratch_module, "SCRATCH_LIMIT_BYTES", 1000 * 8)
    release_scratch()
    kept = scratch("small", (600,))
    assert np.shares_memory(kept, scratch("small", (600,)))
    big = scratch("big", (500,))  # 600 + 500 doubles > 1000
    assert not np.shares_memory(big, scratch("big", (500,)))
    assert np.shares_memory(kept, scratch("small", (600,)))
    release_scratch()


def test_scratch_buffers_are_per_thread():
    """Two threads asking for the same name never share memory (fits may run in threads)."""
    mine = scratch("t", (100,))
    theirs = []
    thread = threading.Thread(target=lambda: theirs.append(scratch("t", (100,))))
    thread.start()
    thread.join()
    assert not np.shares_memory(mine, theirs[0])


def test_channel_fit_results_do_not_alias_scratch_buffers():
    """A fit's outputs stay unchanged when later fits reuse the scratch buffers (no result
    array is a view of one), with and without missing samples."""
    rng = np.random.default_rng(8)
    n, k = 3000, 5
    design = np.column_stack([np.ones(n), rng.standard_normal((n, k - 1))])
    noise = np.zeros(n)
    for t in range(1, n):
        noise[t] = 0.6 * noise[t - 1] + rng.standard_normal()
    flow = design @ np.arange(1.0, k + 1) + noise
    gappy = flow.copy()
    gappy[500:540] = np.nan
    for series in (flow, gappy):
        first = estimate_channel(series, design, max_ar_order=10)
        saved = {
            name: np.array(getattr(first, name), copy=True)
            for name in ("betas", "cov", "fitted", "residuals", "whitened_residuals", "weights")
        }
        spectrum = first.spectral.spectrum.copy()
        white = first.whitened_design.copy()
        other = estimate_channel(rng.standard_normal(n) + series, design, max_ar_order=10)
        assert not np.array_equal(other.betas, first.betas)
        for name, values in saved.items():
            assert_array_equal(getattr(first, name), values)
        assert_array_equal(first.spectral.spectrum, spectrum)
        assert_array_equal(first.whitened_design, white)
