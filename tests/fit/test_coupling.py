"""Frequency dependence of the short-channel coupling (fstats.fit.coupling)."""

import warnings
from pathlib import Path

import numpy as np
import pytest
from scipy import fft, signal
from statsmodels.stats.meta_analysis import combine_effects

from fstats.design import build_design, load_design
from fstats.errors import InputError
from fstats.fit import SubjectGLM
from fstats.fit.components import combined_dof
from fstats.fit.coupling import band_couplings, between_band_variance, coupling_spread
from fstats.simulate import SimulationSettings, simulate_recording

DESIGN = Path(__file__).resolve().parents[2] / "designs" / "subtract_blocks.yaml"
FS = 20.0


def _pink(n, rng):
    """1/f noise (power ∝ 1/f above 0.002 Hz), made by shaping a white spectrum."""
    freqs = np.fft.rfftfreq(n, 1.0 / FS)
    gain = 1.0 / np.sqrt(np.maximum(freqs, 0.002))
    x = np.fft.irfft(np.fft.rfft(rng.standard_normal(n)) * gain, n)
    return x / x.std()


def test_between_band_variance_equals_statsmodels_dl():
    """Source: statsmodels.stats.meta_analysis.combine_effects(method_re='dl') - the
    DerSimonian-Laird tau² and Cochran's Q of the band couplings."""
    h = np.array([1.3, 1.1, 0.95, 0.8, 1.02, 0.7])
    v = np.array([0.02, 0.01, 0.004, 0.003, 0.006, 0.008])
    tau2, q = between_band_variance(h, v)
    ref = combine_effects(h, v, method_re="dl")
    assert tau2 == pytest.approx(ref.tau2, rel=1e-10)
    assert q == pytest.approx(ref.q, rel=1e-10)


def test_between_band_variance_is_zero_for_equal_couplings():
    """Source: DerSimonian & Laird 1986 - tau² is truncated at 0 when Q <= K - 1."""
    tau2, q = between_band_variance(np.full(5, 0.9), np.full(5, 0.01))
    assert tau2 == 0.0 and q == 0.0
    assert np.isnan(between_band_variance(np.array([1.0]), np.array([0.1]))[0])


def test_band_coupling_variance_matches_monte_carlo():
    """Source: heteroscedasticity-consistent (White 1980) variance of a real gain fitted
    to complex Fourier coefficients (derived in fstats.fit.coupling), checked by Monte
    Carlo with noise that is not flat within the bands: over 600 replicates of
    y = 0.7 x + noise, the mean coupling is 0.7 and the spread of each band's coupling
    equals its stated variance within 20 % (Monte Carlo error of the ratio ~6 %)."""
    rng = np.random.default_rng(4)
    n = 6000
    hs, vs = [], []
    for _ in range(600):
        x = _pink(n, rng) + rng.standard_normal(n)
        y = 0.7 * x + 0.5 * _pink(n, rng) + 2.0 * rng.standard_normal(n)
        h, v, _ = band_couplings(y, x, FS)
        hs.append(h)
        vs.append(v)
    hs, vs = np.array(hs), np.array(vs)
    assert hs.shape[1] >= 5
    assert np.all(np.abs(hs.mean(axis=0) - 0.7) < 4 * np.sqrt(vs.mean(axis=0) / 600))
    ratio = hs.var(axis=0, ddof=1) / vs.mean(axis=0)
    assert np.all((ratio > 0.8) & (ratio < 1.2)), ratio


def test_cochran_q_is_chi2_without_frequency_dependence():
    """Source: Cochran 1954 - with one coupling for all bands, Q ~ chi²(K-1): its mean over
    300 replicates is K-1 within 15 % (estimated band variances inflate Q a little);
    with a coupling of 0.5 below 0.1 Hz and 1.5 above, the bands recover both values
    and tau² is clearly positive."""
    rng = np.random.default_rng(5)
    n = 6000
    qs, k = [], None
    for _ in range(300):
        x = _pink(n, rng) + rng.standard_normal(n)
        y = 0.7 * x + 2.0 * rng.standard_normal(n)
        h, v, _ = band_couplings(y, x, FS)
        qs.append(between_band_variance(h, v)[1])
        k = h.size
    assert np.mean(qs) == pytest.approx(k - 1, rel=0.15)

    x = _pink(n, rng) + rng.standard_normal(n)
    sos = signal.butter(6, 0.1, fs=FS, output="sos")
    low = signal.sosfiltfilt(sos, x)
    y = 0.5 * low + 1.5 * (x - low) + 0.5 * rng.standard_normal(n)
    h, v, edges = band_couplings(y, x, FS)
    assert np.all(np.abs(h[edges[:, 1] <= 0.06] - 0.5) < 0.1)
    assert np.all(np.abs(h[edges[:, 0] >= 0.15] - 1.5) < 0.1)
    tau2, q = between_band_variance(h, v)
    assert np.sqrt(tau2) > 0.2 and q > 10 * (h.size - 1)


def test_sensitivity_is_the_derivative_of_the_weighted_fit():
    """Source: Frisch-Waugh-Lovell (common practice) - the sensitivity of every other
    coefficient to the short coefficient equals the finite difference of the weighted
    least-squares fit with the short coefficient held at b and at b + 1."""
    rng = np.random.default_rng(6)
    n = 4000
    x = np.column_stack([np.ones(n), np.sin(np.arange(n) / 300.0), rng.standard_normal(n)])
    x[:, 2] += 0.5 * x[:, 1]
    y = x @ np.array([1.0, 0.3, 0.8]) + rng.standard_normal(n)
    w = rng.uniform(0.2, 1.0, n)
    (spread,) = coupling_spread(y, x, [2], w, FS)
    root = np.sqrt(w)

    def others(b):
        return np.linalg.lstsq(x[:, :2] * root[:, None], (y - b * x[:, 2]) * root, rcond=None)[0]

    np.testing.assert_allclose(spread.sensitivity[:2], others(1.0) - others(0.0), rtol=1e-8)
    assert spread.sensitivity[2] == 0.0
    assert spread.dof == spread.couplings.size - 1


def test_combined_dof_is_satterthwaite():
    """Source: Satterthwaite 1946 - df = (v0 + v1)² / (v0²/df0 + v1²/df1); a zero
    coupling variance leaves the main df unchanged."""
    rng = np.random.default_rng(7)
    n = 3000
    x = np.column_stack([np.ones(n), rng.standard_normal(n)])
    y = 0.5 * x[:, 1] + rng.standard_normal(n)
    (spread,) = coupling_spread(y, x, [1], np.ones(n), FS)
    c = np.array([1.0, 0.0])
    v1 = spread.tau2 * (c @ spread.sensitivity) ** 2
    expected = (0.04 + v1) ** 2 / (0.04**2 / 30.0 + v1**2 / spread.dof)
    component = spread.component("short coupling")
    assert combined_dof(c, 0.04, 30.0, (component,)) == pytest.approx(expected)
    assert combined_dof(np.array([0.0, 1.0]), 0.04, 30.0, (component,)) == 30.0


@pytest.fixture(scope="module")
def recording_and_design():
    settings = SimulationSettings(effect_pct=0.0, scalp_task_fraction=1.0, duration_s=600.0)
    rec = simulate_recording(settings, np.random.default_rng(11)).recording
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return rec, build_design(load_design(DESIGN), rec)


def test_glm_adds_the_coupling_covariance(recording_and_design):
    """Source: common practice (a variance component adds to the covariance) - the
    banded fit's covariance is the estimation's plus tau² s s', its task SE is at least
    the single-coupling SE, its estimates are unchanged, and the band couplings are in
    the diagnostics."""
    rec, design = recording_and_design
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        banded = SubjectGLM(block_averages=False, block_variation=False).fit(
            rec, design, channels=["frontal_a"]
        )
        single = SubjectGLM(
            block_averages=False, block_variation=False, short_coupling="single"
        ).fit(rec, design, channels=["frontal_a"])
    b, s = banded.channel_fits["frontal_a"], single.channel_fits["frontal_a"]
    np.testing.assert_allclose(b.betas, s.betas)
    np.testing.assert_allclose(s.cov, s.estimate.cov)
    (spread,) = b.components
    np.testing.assert_allclose(
        b.cov - b.estimate.cov, spread.tau2 * np.outer(spread.loading, spread.loading)
    )
    j = b.names.index("subtract")
    assert b.se[j] >= s.se[j]
    info = b.diagnostics["short_coupling"]["short:scalp"]
    assert len(info["coupling"]) == len(info["band_edges_hz"]) - 1 >= 3
    assert "short_coupling" not in s.diagnostics


def test_glm_rejects_an_unknown_coupling_option():
    """Source: common practice - a misspelt option is a one-line error with a suggestion."""
    with pytest.raises(InputError, match="short_coupling.*banded"):
        SubjectGLM(short_coupling="bandd")


def test_pair_spectra_equal_scipy_rfft():
    """Source: scipy.fft.rfft - both one-sided spectra taken from one packed complex FFT
    equal scipy's real FFT of each series (to 1e-12 of its largest coefficient), at a
    length with a large prime factor (5 x 7187) and at an even one, with the two series
    1e9 apart in scale."""
    from fstats.fit.coupling import _pair_spectra

    rng = np.random.default_rng(13)
    for n in (5 * 7187, 4000):
        a = 1e-9 * np.cumsum(rng.standard_normal(n))
        b = rng.standard_normal(n)
        for series, ours in zip((a, b), _pair_spectra(np.stack([a, b])), strict=True):
            ref = fft.rfft(series)
            assert ours.shape == ref.shape
            assert np.max(np.abs(ours - ref)) <= 1e-12 * np.max(np.abs(ref))


def test_coupling_spread_skips_missing_rows_as_if_contiguous():
    """Source: the documented convention (missing samples are skipped, the rest taken as
    contiguous), checked against dropping the rows by hand - NaN flow, NaN or zero
    weights, with and without NaN design rows, give the spread of the remaining rows
    (couplings, variances, sensitivity and tau² to 1e-9)."""
    rng = np.random.default_rng(14)
    n = 5000
    base = np.column_stack(
        [np.ones(n), np.sin(np.arange(n) / 200.0), _pink(n, rng) + rng.standard_normal(n)]
    )
    y = base @ np.array([1.0, 0.3, 0.8]) + _pink(n, rng) + rng.standard_normal(n)
    w = rng.uniform(0.2, 1.0, n)
    y[[10, 300]] = np.nan
    w[700], w[900] = 0.0, np.nan
    for bad_rows in ([], [50, 51]):
        x = base.copy()
        x[bad_rows, 1] = np.nan
        keep = np.isfinite(y) & np.isfinite(x).all(axis=1) & np.isfinite(w) & (w > 0)
        (ours,) = coupling_spread(y, x, [2], w, FS)
        (ref,) = coupling_spread(y[keep], x[keep], [2], w[keep], FS)
        for field in ("couplings", "variances", "sensitivity"):
            np.testing.assert_allclose(getattr(ours, field), getattr(ref, field), rtol=1e-9)
        assert ours.tau2 == pytest.approx(ref.tau2, rel=1e-9, abs=1e-12 * ref.variances.max())
