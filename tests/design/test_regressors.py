"""Task regressors: fine-grid stimulus, FFT convolution, averaging over each sample."""

import numpy as np
import pytest
from numpy.testing import assert_allclose
from scipy import stats

from fstats.design.regressors import (
    average_to_samples,
    fine_grid,
    fir_regressors,
    stimulus_on_grid,
    task_regressor,
)


def _sample_average(func, times, step, n_sub=200):
    """Mean of func over [t_k, t_k + step) by a fine midpoint rule."""
    offsets = (np.arange(n_sub) + 0.5) / n_sub * step
    return func(times[:, None] + offsets[None, :]).mean(axis=1)


def test_boxcar_sample_values_are_covered_fractions():
    """Source: closed form - the average of a unit block over [k, k+1) s is the covered
    fraction: block 1.23-3.37 s at 1 Hz gives 0, 0.77, 1, 0.37, 0."""
    times = np.arange(5.0)
    x = task_regressor(times, [1.23], [2.14], [1.0], model="boxcar")[:, 0]
    assert_allclose(x, [0.0, 0.77, 1.0, 0.37, 0.0], atol=1e-12)


def test_impulse_regressor_is_sample_average_of_gamma_density():
    """Source: scipy.stats.gamma.cdf - a 0-length event of amplitude a gives a times the
    unit-area gamma-variate kernel, whose average over [t_k, t_k+dt) is
    (F(t_k+dt-onset) - F(t_k-onset))/dt with F the gamma CDF (shape 4, scale 4/3 s)."""
    step = 0.1
    times = np.arange(0.0, 60.0, step)
    onset = 10.037
    x = task_regressor(times, [onset], [0.0], [2.0], model="flow")[:, 0]
    cdf = stats.gamma(4.0, scale=4.0 / 3.0).cdf
    expected = 2.0 * (cdf(times + step - onset) - cdf(times - onset)) / step
    assert_allclose(x, expected, atol=2e-3 * expected.max())


def test_block_regressor_matches_closed_form_and_plateaus():
    """Source: closed form - a unit-area gamma kernel convolved with a block [a, a+D) is
    F(t-a) - F(t-a-D) (F = gamma CDF); averaged over each sample; long blocks plateau at the
    amplitude (REFERENCE-CHECKS 1.3 normalisation)."""
    step = 0.05
    times = np.arange(0.0, 200.0, step)
    onset, duration = 20.013, 80.0
    x = task_regressor(
        times,
        [onset],
        [duration],
        [1.5],
        model="gamma_variate",
        params={"peak_s": 4.0, "shape": 4.0, "lag_s": 0.0},
    )[:, 0]
    dist = stats.gamma(4.0, scale=4.0 / 3.0)
    expected = _sample_average(
        lambda t: 1.5 * (dist.cdf(t - onset) - dist.cdf(t - onset - duration)), times, step
    )
    assert_allclose(x, expected, atol=1e-3)
    plateau = (times > onset + 40) & (times < onset + duration)
    assert_allclose(x[plateau], 1.5, rtol=1e-6)


def test_brief_event_between_samples_keeps_its_area():
    """Source: common practice - integration (not point sampling) keeps a 0.2 s event that
    falls between 1 Hz samples; the regressor's area equals the event's area (0.2 s) for a
    unit-area kernel."""
    times = np.arange(0.0, 100.0, 1.0)
    x = task_regressor(times, [10.4], [0.2], [1.0], model="canonical")[:, 0]
    assert_allclose(x.sum() * 1.0, 0.2, rtol=1e-3)
    box = task_regressor(times, [10.4], [0.2], [1.0], model="boxcar")[:, 0]
    assert_allclose(box, np.where(times == 10.0, 0.2, 0.0), atol=1e-12)


def test_impulse_equals_limit_of_short_blocks():
    """Source: closed form - an impulse of area a is the limit of a block of height a/ε and
    length ε; at ε = 1 ms the difference is O(ε)."""
    times = np.arange(0.0, 40.0, 0.1)
    impulse = task_regressor(times, [5.0], [0.0], [1.0], model="glover")[:, 0]
    block = task_regressor(times, [5.0], [0.001], [1000.0], model="glover")[:, 0]
    assert_allclose(impulse, block, atol=2e-3 * impulse.max())


def test_regressor_is_linear_in_amplitude_and_additive_over_events():
    """Source: common practice - convolution is linear."""
    times = np.arange(0.0, 120.0, 0.05)
    a = task_regressor(times, [10.0], [5.0], [1.0], model="flow")
    b = task_regressor(times, [50.0], [0.0], [1.0], model="flow")
    both = task_regressor(times, [10.0, 50.0], [5.0, 0.0], [2.0, 3.0], model="flow")
    assert_allclose(both, 2 * a + 3 * b, atol=1e-12)


def test_stimulus_on_grid_area_is_exact():
    """Source: closed form - block area = height x length, impulse area = amplitude."""
    stim = stimulus_on_grid(
        [1.234, 5.5], [2.0, 0.0], [3.0, 2.0], start_s=0.0, fine_step_s=0.01, n_fine=1000
    )
    assert_allclose(stim.sum() * 0.01, 3.0 * 2.0 + 2.0, rtol=1e-12)


def test_fine_grid_is_at_least_100_hz_and_divides_the_sample():
    """Source: common practice - fine step <= 10 ms and a whole number per sample."""
    for step in (0.02, 0.05, 0.1, 0.0333, 1.0):
        oversample, fine = fine_grid(0.0, step, 10)
        assert fine <= 0.01 + 1e-12
        assert_allclose(fine * oversample, step)
    assert_allclose(average_to_samples(np.arange(6.0), 3), [1.0, 4.0])


def test_fir_columns_are_onset_locked_bins():
    """Source: closed form - FIR bin j of an event at 10.5 s with 2 s bins covers
    [10.5 + 2j, 12.5 + 2j); at 1 Hz the covered fractions are 0.5, 1, 0.5."""
    times = np.arange(0.0, 30.0, 1.0)
    fir = fir_regressors(times, [10.5], [1.0], bin_s=2.0, n_bins=3)
    assert fir.shape == (30, 3)
    expected0 = np.zeros(30)
    expected0[[10, 11, 12]] = [0.5, 1.0, 0.5]
    assert_allclose(fir[:, 0], expected0, atol=1e-12)
    assert_allclose(fir[:, 2], np.roll(expected0, 4), atol=1e-12)
    assert_allclose(fir.sum(axis=1).sum(), 6.0, atol=1e-12)


def test_temporal_derivative_matches_analytic_derivative():
    """Source: closed form - d/dt of the gamma density G(t; a, 1) is G(t; a, 1)((a-1)/t - 1);
    the temporal-derivative column of an impulse is the sample average of h'(t - onset) for
    the canonical h = (G(t;6,1) - G(t;16,1)/6) / 0.83344 (area on 0-32 s)."""
    step = 0.05
    times = np.arange(0.0, 60.0, step)
    cols = task_regressor(times, [10.0], [0.0], [1.0], model="canonical", derivatives=("temporal",))
    area = stats.gamma.cdf(32.0, 6) - stats.gamma.cdf(32.0, 16) / 6

    def dh(t):
        u = t - 10.0
        pos = np.where(u > 0, u, 1.0)
        d = stats.gamma.pdf(pos, 6) * (5 / pos - 1) - stats.gamma.pdf(pos, 16) * (15 / pos - 1) / 6
        return np.where((u > 0) & (u <= 32.0), d, 0.0) / area

    expected = _sample_average(dh, times, step)
    assert_allclose(cols[:, 1], expected, atol=2e-3 * np.abs(expected).max())


@pytest.mark.parametrize("which", [("dispersion",), ("temporal", "dispersion")])
def test_derivative_columns_shape(which):
    """Source: common practice - one extra column per requested derivative."""
    times = np.arange(0.0, 60.0, 0.05)
    cols = task_regressor(times, [10.0], [0.0], [1.0], model="flow", derivatives=which)
    assert cols.shape == (times.size, 1 + len(which))
    assert np.all(np.abs(cols[:, 1:]).max(axis=0) > 0)


def test_dispersion_derivative_of_gamma_variate_matches_scipy():
    """Source: scipy.stats.gamma - the dispersion column of an impulse is
    -d h / d n at fixed peak (h = gamma pdf, shape n, scale (peak - lag)/(n - 1)), computed
    here by a central difference of scipy densities; fstats uses a 1 % forward step, so
    agreement is to about 1 % of the column's range."""
    step = 0.05
    times = np.arange(0.0, 60.0, step)
    cols = task_regressor(times, [10.0], [0.0], [1.0], model="flow", derivatives=("dispersion",))

    def pdf(t, n):
        u = t - 10.0
        return stats.gamma.pdf(u, n, scale=4.0 / (n - 1))

    dn = 1e-4
    expected = _sample_average(lambda t: -(pdf(t, 4 + dn) - pdf(t, 4 - dn)) / (2 * dn), times, step)
    assert_allclose(cols[:, 1], expected, atol=0.015 * np.abs(expected).max())


def test_events_before_the_recording_keep_their_response_tail():
    """Source: closed form - a block from -30 s to +30 s seen from a recording starting at 0
    is the same curve as on a longer time base: F(t + 30) - F(t - 30) with F the gamma CDF
    of the unit-area flow kernel; an impulse at -3 s still shows its tail."""
    step = 0.1
    times = np.arange(0.0, 100.0, step)
    x = task_regressor(times, [-30.0], [60.0], [1.0], model="flow")[:, 0]
    dist = stats.gamma(4.0, scale=4.0 / 3.0)
    expected = _sample_average(lambda t: dist.cdf(t + 30.0) - dist.cdf(t - 30.0), times, step)
    assert_allclose(x, expected, atol=1e-3)
    assert_allclose(x[:50], 1.0, atol=1e-3)  # already at plateau when the recording starts
    tail = task_regressor(times, [-3.0], [0.0], [1.0], model="flow")[:, 0]
    longer = task_regressor(np.arange(-10.0, 100.0, step), [-3.0], [0.0], [1.0], model="flow")
    assert_allclose(tail, longer[100:, 0], atol=1e-12)
