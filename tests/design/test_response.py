"""Response functions against their published definitions and scipy.stats.gamma."""

import numpy as np
import pytest
from numpy.testing import assert_allclose
from scipy import stats

from fstats.design.response import (
    FLOW_PEAK_S,
    canonical_hrf,
    gamma_variate,
    glover_hrf,
    response_kernel,
)

DT = 0.001
T = np.arange(0.0, 32.0 + DT / 2, DT)


def _zero_crossing(h):
    peak = np.argmax(h)
    after = np.flatnonzero(h[peak:] < 0)[0] + peak
    # linear interpolation between the last positive and first negative sample
    return T[after - 1] + DT * h[after - 1] / (h[after - 1] - h[after])


def test_glover_peak_undershoot_zero_crossing():
    """Source: Glover 1999 NeuroImage 9:416 double gamma with a1=6, a2=12, b=0.9, c=0.35;
    values from REFERENCE-CHECKS 1.1 (max 5.240 s, h=0.9686; min 12.255 s, h=-0.2494;
    zero crossing 9.465 s; FWHM 4.47 s)."""
    h = glover_hrf(T)
    assert h[0] == 0.0
    assert abs(T[np.argmax(h)] - 5.240) <= 0.002
    assert_allclose(h.max(), 0.9686, rtol=1e-4)
    assert abs(T[np.argmin(h)] - 12.255) <= 0.002
    assert_allclose(h.min(), -0.2494, rtol=2e-4)
    assert abs(_zero_crossing(h) - 9.465) <= 0.002
    half = T[h >= h.max() / 2]
    assert abs((half[-1] - half[0]) - 4.47) <= 0.01


def test_glover_terms_peak_at_d_i():
    """Source: Glover 1999 - each term (t/d)^a exp(-(t-d)/b) peaks at d = a b with value 1
    (closed form: derivative a/t - 1/b = 0)."""
    h1 = glover_hrf(T, c=0.0)
    assert abs(T[np.argmax(h1)] - 5.4) <= DT
    assert_allclose(h1.max(), 1.0, rtol=1e-9)


def test_canonical_matches_scipy_gamma_difference():
    """Source: scipy.stats.gamma.pdf - canonical double gamma G(6,1) - G(16,1)/6."""
    expected = stats.gamma.pdf(T, 6) - stats.gamma.pdf(T, 16) / 6
    assert_allclose(canonical_hrf(T), expected, rtol=1e-12, atol=1e-15)


def test_canonical_peak_min_zero_crossing_and_area():
    """Source: REFERENCE-CHECKS 1.2 [computed] - max 4.999 s (0.17544), min 15.749 s
    (-0.01560), zero crossing 12.065 s, integral 0-32 s 0.83344 (0-inf: 5/6 exactly)."""
    h = canonical_hrf(T)
    assert h[0] == 0.0
    assert abs(T[np.argmax(h)] - 4.999) <= 0.002
    assert_allclose(h.max(), 0.17544, rtol=1e-4)
    assert abs(T[np.argmin(h)] - 15.749) <= 0.002
    assert_allclose(h.min(), -0.01560, rtol=1e-3)
    assert abs(_zero_crossing(h) - 12.065) <= 0.002
    assert_allclose(np.trapezoid(h, T), 0.83344, rtol=1e-4)
    long_t = np.arange(0, 200, 0.01)
    assert_allclose(np.trapezoid(canonical_hrf(long_t), long_t), 5 / 6, rtol=1e-6)


@pytest.mark.parametrize(
    ("shape", "tau", "delta", "peak"), [(3, 1.25, 2.5, 5.000), (3, 1.08, 2.05, 4.210)]
)
def test_gamma_variate_boynton_form(shape, tau, delta, peak):
    """Source: Boynton et al. 1996 J Neurosci 16:4207, h = ((t-δ)/τ)^(n-1) e^{-(t-δ)/τ}/(τ(n-1)!);
    equals scipy.stats.gamma.pdf(t, n, loc=δ, scale=τ); mode δ+(n-1)τ (REFERENCE-CHECKS 1.4)."""
    h = gamma_variate(T, peak_s=delta + (shape - 1) * tau, shape=shape, lag_s=delta)
    x = np.clip((T - delta) / tau, 0, None)
    by_hand = np.where(T > delta, x ** (shape - 1) * np.exp(-x) / (tau * 2.0), 0.0)  # (3-1)! = 2
    assert_allclose(h, by_hand, rtol=1e-12, atol=1e-300)
    assert_allclose(h, stats.gamma.pdf(T, shape, loc=delta, scale=tau), rtol=1e-12, atol=1e-300)
    assert abs(T[np.argmax(h)] - peak) <= DT
    long_t = np.arange(0, 100, 0.001)
    area = np.trapezoid(gamma_variate(long_t, peak_s=peak, shape=shape, lag_s=delta), long_t)
    assert_allclose(area, 1.0, rtol=1e-6)


@pytest.mark.parametrize(
    ("model", "params"),
    [("glover", {}), ("canonical", {}), ("flow", {}), ("gamma_variate", {"peak_s": 6.0})],
)
def test_kernel_normalisation_properties(model, params):
    """Source: REFERENCE-CHECKS 1.3 [practice] - unit area on the grid, h(0)=0, h -> 0 at the
    end of its support (|h(end)| < 1e-3 max)."""
    step = 0.01
    h = response_kernel(model, params, step)
    assert_allclose(h.sum() * step, 1.0, rtol=1e-12)
    assert h[0] == 0.0
    assert abs(h[-1]) < 1e-3 * h.max()


def test_flow_default_peaks_earlier_than_bold_kernels():
    """Source: REFERENCE-CHECKS 1.5 - CBF peaks ~1 s before BOLD after a 1 s stimulus
    (Magn Reson Med 2000 43:768; Yang et al. 2000 NeuroImage 12:287); the flow default must
    peak 0.2-1.5 s before the canonical (5.0 s) and Glover (5.24 s) kernels, and its response
    to a 1 s stimulus should peak near the measured 4.2 s CBF peak (±0.5 s) without undershoot."""
    step = 0.001
    flow = response_kernel("flow", {}, step)
    flow_peak = np.argmax(flow) * step
    assert abs(flow_peak - FLOW_PEAK_S) <= step
    for model in ("canonical", "glover"):
        lead = np.argmax(response_kernel(model, {}, step)) * step - flow_peak
        assert 0.2 <= lead <= 1.5
    one_s = np.convolve(flow, np.ones(1000) * step)
    assert abs(np.argmax(one_s) * step - 4.2) <= 0.5
    assert flow.min() >= 0.0


def test_gamma_variate_rejects_peak_before_lag():
    """Source: common practice - the mode δ+(n-1)τ needs τ > 0."""
    with pytest.raises(ValueError):
        gamma_variate(T, peak_s=1.0, lag_s=2.0)
