"""Block-to-block variation of the response amplitude (fstats.fit.block_spread)."""

import warnings
from pathlib import Path

import numpy as np
import pytest
import statsmodels.api as sm

from fstats.design import build_design, load_design
from fstats.fit import SubjectGLM
from fstats.fit.autoregressive import whiten, whitened_rows
from fstats.fit.block_spread import between_block_variance, block_pieces, block_spread
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
    from fstats.fit.block_spread import _whiten_pieces

    rng = np.random.default_rng(8)
    times, onsets, column = _blocks()
    pieces = block_pieces(column + 0.01, times, onsets)
    valid = rng.random(times.size) > 0.01
    coefs = rng.normal(0.0, 0.1, 15)
    kept = whitened_rows(valid, coefs.size)
    zeroed = np.where(valid[:, None], pieces, 0.0)
    np.testing.assert_allclose(
        _whiten_pieces(zeroed, coefs, kept), whiten(zeroed, coefs, valid), atol=1e-12
    )
