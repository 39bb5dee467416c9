"""Block-to-block variation of the response amplitude (fstats.fit.block_spread)."""

import warnings
from pathlib import Path

import numpy as np
import pytest
import statsmodels.api as sm
from scipy import signal
from scipy.fft import next_fast_len

from fstats.design import build_design, load_design
from fstats.fit import SubjectGLM
from fstats.fit.autoregressive import whiten, whitened_rows
from fstats.fit.block_spread import (
    between_block_variance,
    block_pieces,
    block_spread,
    block_spreads,
)
from fstats.fit.covariance import spectral_sandwich
from fstats.simulate import SimulationSettings, simulate_recording

DESIGN = Path(__file__).resolve().parents[2] / "designs" / "subtract_blocks.yaml"
FS = 10.0


def _blocks(n_blocks=10, cycle_s=60.0, on_s=25.0):
    times = np.arange(int(n_blocks * cycle_s * FS)) / FS
    onsets = np.arange(n_blocks) * cycle_s + 10.0
    column = np.zeros_like(times)
    for onset in onsets:
        column[(times >= onset) & (times < onset + on_s)] = 1.0
    return times, onsets, column


def test_block_pieces_add_up_to_the_column():
    """Source: common practice (a partition of a regressor) - the pieces sum to the
    column exactly and piece j is zero outside [onset j, onset j+1)."""
    times, onsets, column = _blocks()
    column = column + 0.1  # non-zero everywhere, so the windows show
    pieces = block_pieces(column, times, onsets)
    np.testing.assert_array_equal(pieces.sum(axis=1), column)
    for j in range(1, onsets.size - 1):
        inside = (times >= onsets[j]) & (times < onsets[j + 1])
        assert np.all(pieces[~inside, j] == 0) and np.all(pieces[inside, j] == column[inside])
    assert np.all(pieces[times < onsets[0], 0] == column[times < onsets[0]])


def test_between_block_variance_is_unbiased_with_correlated_noise():
    """Source: method of moments (DerSimonian & Laird 1986, full noise covariance),
    checked by Monte Carlo - amplitudes with a between-block sd of 1.0 and noise that
    is correlated between neighbouring blocks (AR(1), rho 0.5, sd 0.5): the mean of
    tau² over 4000 replicates is 1.0 within 5 %; with no between-block variation the
    mean is small (truncation at 0 only)."""
    rng = np.random.default_rng(1)
    n = 10
    lag = np.abs(np.subtract.outer(np.arange(n), np.arange(n)))
    cov = 0.25 * 0.5**lag
    chol = np.linalg.cholesky(cov)
    shares = np.full(n, 1.0 / n)
    tau_hat, null_hat = [], []
    for _ in range(4000):
        noise = chol @ rng.standard_normal(n)
        tau_hat.append(between_block_variance(3.0 + rng.standard_normal(n) + noise, cov, shares))
        null_hat.append(between_block_variance(3.0 + noise, cov, shares))
    assert np.mean(tau_hat) == pytest.approx(1.0, rel=0.05)
    assert np.mean(null_hat) < 0.1


def _main_fit(y, x, coefs):
    """Whitened least-squares fit: (betas, whitened residuals on the full time base)."""
    valid = np.isfinite(y)
    kept = whitened_rows(valid, len(coefs))
    yw, xw = whiten(y, np.asarray(coefs), valid), whiten(x, np.asarray(coefs), valid)
    betas = np.linalg.lstsq(xw, yw, rcond=None)[0]
    white = np.full(y.size, np.nan)
    white[kept] = yw - xw @ betas
    return betas, white


def test_block_amplitudes_equal_the_split_model_statsmodels_ols():
    """Source: statsmodels OLS and Frisch-Waugh-Lovell - with no AR filter, unit weights
    and the model covariance, the block amplitudes (around their mean) equal the OLS
    coefficients of the split design (one column per block plus the other columns),
    although only the main fit's residuals are regressed."""
    rng = np.random.default_rng(2)
    times, onsets, column = _blocks()
    x = np.column_stack([column, np.ones_like(times), np.cos(np.pi * times / times[-1])])
    gains = 1.0 + 0.3 * rng.standard_normal(onsets.size)
    pieces = block_pieces(column, times, onsets)
    y = pieces @ gains + 0.5 + rng.standard_normal(times.size)
    main = sm.OLS(y, x).fit()
    ones = np.ones_like(y)
    spread = block_spread(
        y,
        x,
        0,
        times,
        onsets,
        np.array([]),
        ones,
        main.resid,
        main.params[0],
        FS,
        covariance="model",
    )
    ref = sm.OLS(y, np.column_stack([pieces, x[:, 1:]])).fit().params[: onsets.size]
    ours = spread.amplitudes
    np.testing.assert_allclose(ours - ours.mean(), ref - ref.mean(), rtol=1e-8, atol=1e-10)
    assert ours.mean() == pytest.approx(main.params[0])
    assert spread.shares.sum() == pytest.approx(1.0)
    assert spread.dof == onsets.size - 1


def test_block_spread_recovers_the_gain_variation():
    """Source: the simulation's known truth (common practice) - blocks with gains of sd
    0.4 in AR(1) noise, fitted with the true AR filter: the median estimated tau over
    30 replicates is within 25 % of 0.4; with equal gains the median tau is below 0.15."""
    rng = np.random.default_rng(3)
    times, onsets, column = _blocks(n_blocks=12)
    x = np.column_stack([column, np.ones_like(times)])
    pieces = block_pieces(column, times, onsets)
    phi = 0.9

    def noise():
        e = rng.standard_normal(times.size)
        out = np.empty_like(e)
        out[0] = e[0]
        for t in range(1, e.size):
            out[t] = phi * out[t - 1] + e[t]
        return 0.3 * out

    taus, nulls = [], []
    ones = np.ones(times.size)
    for _ in range(30):
        gains = 1.0 + 0.4 * rng.standard_normal(onsets.size)
        for store, g in ((taus, gains), (nulls, np.ones(onsets.size))):
            y = pieces @ g + noise()
            betas, white = _main_fit(y, x, [phi])
            s = block_spread(y, x, 0, times, onsets, np.array([phi]), ones, white, betas[0], FS)
            store.append(np.sqrt(s.tau2))
    assert np.median(taus) == pytest.approx(0.4, rel=0.25)
    assert np.median(nulls) < 0.15


def test_glm_adds_the_block_component_on_the_condition_only():
    """Source: common practice (a random block effect adds variance to its condition's
    mean) - the block component sits on the 'subtract' diagonal only, block amplitudes
    are in the diagnostics, and block_variation=False adds nothing."""
    settings = SimulationSettings(effect_pct=15.0, scalp_task_fraction=0.0, duration_s=600.0)
    rec = simulate_recording(settings, np.random.default_rng(12)).recording
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        design = build_design(load_design(DESIGN), rec)
        on = SubjectGLM(block_averages=False, short_coupling="single").fit(
            rec, design, channels=["frontal_a"]
        )
        off = SubjectGLM(block_averages=False, short_coupling="single", block_variation=False).fit(
            rec, design, channels=["frontal_a"]
        )
    a, b = on.channel_fits["frontal_a"], off.channel_fits["frontal_a"]
    assert b.components == () and "block_spread" not in b.diagnostics
    names = [c.name for c in a.components]
    assert names == ["block amplitude: subtract", "block amplitude: recover"]
    extra = a.cov - b.cov
    j = a.names.index("subtract")
    others = np.delete(np.arange(len(a.names)), [j, a.names.index("recover")])
    assert extra[j, j] >= 0 and np.all(extra[np.ix_(others, others)] == 0)
    info = a.diagnostics["block_spread"]["subtract"]
    assert info["n_blocks"] == len(design.info["events"].select("subtract").onsets_s)


def test_pieces_whitened_on_their_support_equal_the_full_filter():
    """Source: common practice (a causal FIR filter of a signal that is zero outside a
    window is zero before it and p samples after it) - whitening each piece on its own
    support equals fstats' whiten on the whole series, with gaps, to 1e-12."""
    from fstats.fit.block_spread import _filter_support

    rng = np.random.default_rng(8)
    times, onsets, column = _blocks()
    pieces = block_pieces(column + 0.01, times, onsets)
    valid = rng.random(times.size) > 0.01
    coefs = rng.normal(0.0, 0.1, 15)
    kept = whitened_rows(valid, coefs.size)
    zeroed = np.where(valid[:, None], pieces, 0.0)
    taps = np.concatenate([[1.0], -coefs])
    ours = np.zeros_like(zeroed)
    for j in range(zeroed.shape[1]):
        start, values = _filter_support(zeroed[:, j], taps, 0, times.size)
        ours[start : start + values.size, j] = values
    np.testing.assert_allclose(ours[kept], whiten(zeroed, coefs, valid), atol=1e-12)


def _gain_data(rng, coefs, n_blocks=12):
    """Blocks with varying gains in AR noise, with gaps and down-weighted rows."""
    times, onsets, column = _blocks(n_blocks=n_blocks)
    x = np.column_stack([column, np.ones_like(times), np.cos(np.pi * times / times[-1])])
    gains = 1.0 + 0.4 * rng.standard_normal(onsets.size)
    y = block_pieces(column, times, onsets) @ gains + signal.lfilter(
        [1.0], [1.0, -0.8], rng.standard_normal(times.size)
    )
    y[rng.random(times.size) < 0.005] = np.nan
    betas, white = _main_fit(y, x, coefs)
    weights = np.where(np.isfinite(white), rng.uniform(0.3, 1.0, times.size), np.nan)
    weights[rng.random(times.size) < 0.01] = 0.0
    return times, onsets, x, y, betas, white, weights


def _handed_in(rng):
    """block_spreads arguments for simulated gain data, the design whitened with
    scipy.signal.lfilter on the kept rows (n_kept, k), and the kept rows' weights."""
    coefs = rng.normal(0.0, 0.05, 15)
    times, onsets, x, y, betas, white, weights = _gain_data(rng, coefs)
    valid = np.isfinite(y)
    kept = whitened_rows(valid, coefs.size)
    taps = np.concatenate([[1.0], -coefs])
    handed = signal.lfilter(taps, [1.0], np.where(valid[:, None], x, 0.0), axis=0)[kept]
    args = (y, x, {"a": (0, onsets, betas[0])}, times, coefs, weights, white, FS)
    return args, handed, np.nan_to_num(weights[kept])


def test_reusing_the_main_fits_whitened_design_changes_nothing():
    """Source: scipy.signal.lfilter - a whitened design handed in (filtered here column
    by column with scipy's direct-form filter and passed as a transposed view of
    row-major series, as the main fit holds it) gives the block amplitudes, shares and
    tau² of whitening the design inside block_spreads (FFT convolution for p > 12), to
    1e-9, with gaps in the flow and zero weights; a design of the wrong shape is refused."""
    rng = np.random.default_rng(9)
    args, handed, _ = _handed_in(rng)
    handed = np.ascontiguousarray(handed.T).T
    ref = block_spreads(*args)["a"]
    ours = block_spreads(*args, whitened_design=handed)["a"]
    assert ref.tau2 > 0
    for field in ("amplitudes", "shares", "tau2"):
        np.testing.assert_allclose(getattr(ours, field), getattr(ref, field), rtol=1e-9)
    # the design handed in is the one used: a different third column moves the amplitudes
    other = handed.copy()
    other[:, 2] = rng.standard_normal(other.shape[0])
    moved = block_spreads(*args, whitened_design=other)["a"]
    assert np.max(np.abs(moved.amplitudes - ref.amplitudes)) > 1e-6
    with pytest.raises(ValueError, match="whitened_design"):
        block_spreads(*args, whitened_design=handed[1:])


def test_sandwich_from_rows_equals_the_spectral_sandwich():
    """Source: fstats.fit.covariance.spectral_sandwich - an internal consistency check
    (the same formula, not an outside reference): the block-spread sandwich from
    regressor rows, zero-padded to the FFT length or not, with robust or unit weights,
    has the covariance of the package's spectral sandwich to 1e-10."""
    from fstats.fit.covariance import sandwich_cov_rows as _sandwich_cov

    rng = np.random.default_rng(10)
    n, k = 3001, 6
    x = rng.standard_normal((n, k))
    x[:, 0] = np.cumsum(rng.standard_normal(n)) / 30.0
    e = rng.standard_normal(n) + 0.5 * np.cumsum(rng.standard_normal(n)) / 30.0
    n_fft = next_fast_len(n, real=True)
    for w in (rng.uniform(0.2, 1.0, n), np.ones(n)):
        inv = np.linalg.inv(x.T @ (w[:, None] * x))
        ref = spectral_sandwich(x, e, w, inv, smoothing_bins=4).cov
        rows = np.ascontiguousarray(x.T)
        padded = np.zeros((2, k, n_fft))
        padded[0, :, :n] = rows
        padded[1, :, :n] = rows * np.sqrt(w)
        unit = bool(np.all(w == 1.0))
        plain = _sandwich_cov(
            rows, None if unit else rows * np.sqrt(w), w * e, inv, smoothing_bins=4
        )
        cut = _sandwich_cov(
            padded[0], None if unit else padded[1], w * e, inv, smoothing_bins=4, n_samples=n
        )
        for ours in (plain, cut):
            np.testing.assert_allclose(ours, ref, rtol=1e-10, atol=1e-12 * np.abs(ref).max())


def test_block_windows_are_the_block_pieces():
    """Source: block_pieces (an internal consistency check of two forms of the same
    partition) - the windows block_spreads filters, put back on the time base, are
    block_pieces' columns exactly, with sorted and with shuffled sample times."""
    from fstats.fit.block_spread import _block_windows

    rng = np.random.default_rng(11)
    times, onsets, column = _blocks()
    column = column + 0.1
    for order in (np.arange(times.size), rng.permutation(times.size)):
        t, c = times[order], column[order]
        dense = block_pieces(c, t, onsets)
        scattered = np.zeros_like(dense)
        for j, (lo, values) in enumerate(_block_windows(c, t, onsets)):
            scattered[lo : lo + values.size, j] = values
        np.testing.assert_array_equal(scattered, dense)


def test_handing_in_the_main_fits_weighted_gram_changes_nothing():
    """Source: numpy - X̃'WX̃ formed from the handed-in whitened design with the weights
    (numpy.einsum over the kept rows; rows with zero weight add nothing) gives the same
    block amplitudes and tau² as the Gram formed inside; a wrong shape is refused."""
    args, handed, w = _handed_in(np.random.default_rng(10))
    gram = np.einsum("ti,t,tj->ij", handed, w, handed)
    ref = block_spreads(*args, whitened_design=handed)["a"]
    ours = block_spreads(*args, whitened_design=handed, whitened_gram=gram)["a"]
    for field in ("amplitudes", "shares", "tau2"):
        np.testing.assert_allclose(getattr(ours, field), getattr(ref, field), rtol=1e-9)
    with pytest.raises(ValueError, match="whitened_gram"):
        block_spreads(*args, whitened_design=handed, whitened_gram=gram[1:])
