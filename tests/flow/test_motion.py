"""Tests of fstats/flow/motion.py: jump detection against a robust running scale, correction."""

import numpy as np
import pytest
from numpy.testing import assert_allclose

from fstats.flow.motion import correct_motion, detect_motion, mask_segments

FS = 20.0


def _flow(rng, duration_s=600.0):
    """BFi with a 15 % cardiac pulse at 1.1 Hz and 3 % white noise (common practice)."""
    t = np.arange(0.0, duration_s, 1 / FS)
    pulse = 0.15 * np.sin(2 * np.pi * 1.1 * t)
    return t, 1e-8 * (1 + pulse + 0.03 * rng.standard_normal(t.size))


def test_clean_flow_with_cardiac_pulse_is_not_flagged():
    """Source: common practice - the cardiac pulse raises the robust scale and is no artefact."""
    rng = np.random.default_rng(0)
    _, flow = _flow(rng)
    assert detect_motion(flow, FS).sum() == 0


def test_spike_and_step_are_found_where_they_are():
    """Source: common practice - motion shows as sudden jumps far outside the MAD-based
    scale of the first differences; the segments cover the injected events."""
    rng = np.random.default_rng(1)
    t, flow = _flow(rng)
    flow[(t >= 100) & (t < 101.5)] *= 2.5  # spike
    flow[t >= 300] *= 0.6  # baseline shift
    segments = mask_segments(detect_motion(flow, FS), t)
    assert len(segments) == 2
    (a0, a1), (b0, b1) = segments
    assert a0 <= 100.0 and a1 >= 101.45 and a1 - a0 < 4
    assert b0 <= 300.0 <= b1 and b1 - b0 < 3


def test_detection_is_scale_free_and_channelwise():
    """Source: common practice - differences of log flow make the test independent of units;
    channels are screened independently."""
    rng = np.random.default_rng(2)
    t, flow = _flow(rng)
    flow[t >= 200] *= 1.8
    _, other = _flow(rng)
    both = np.column_stack([flow, other])
    mask = detect_motion(both, FS)
    assert np.array_equal(mask[:, 0], detect_motion(flow * 1e8, FS))
    assert mask[:, 0].any() and not mask[:, 1].any()


@pytest.mark.parametrize("method", ["baseline", "spline"])
def test_correction_restores_the_level_after_a_shift(method):
    """Source: common practice - piecewise baseline (and spline, Scholkmann et al. 2010,
    recalled from memory) correction removes a step: the level after the artefact returns to
    the level before it, within the noise of a 5 s median."""
    rng = np.random.default_rng(3)
    t, clean = _flow(rng)
    flow = clean.copy()
    flow[t >= 300] *= 0.6
    mask = detect_motion(flow, FS)
    fixed = correct_motion(flow, mask, FS, method=method)
    after = (t > 310) & ~mask
    assert np.median(fixed[after]) / np.median(clean[after]) == pytest.approx(1.0, abs=0.03)
    before = t < 295
    assert_allclose(fixed[before], flow[before])  # untouched before the artefact
    assert np.all(np.isfinite(fixed))


def test_mark_leaves_flow_unchanged_and_input_is_not_modified():
    """Source: common practice - "mark" only masks; no method writes into its input."""
    rng = np.random.default_rng(4)
    t, flow = _flow(rng)
    flow[t >= 300] *= 0.6
    mask = detect_motion(flow, FS)
    copy = flow.copy()
    assert np.array_equal(correct_motion(flow, mask, FS, method="mark"), flow)
    correct_motion(flow, mask, FS, method="spline")
    assert np.array_equal(flow, copy)


def test_nan_samples_are_skipped():
    """Source: common practice - missing samples (failed g2 fits) do not create artefacts."""
    rng = np.random.default_rng(5)
    _, flow = _flow(rng)
    flow[1000:1010] = np.nan
    mask = detect_motion(flow, FS)
    assert mask.sum() == 0


def test_mask_segments():
    """Source: common practice - runs of True as [start, stop] sample times."""
    t = np.arange(10) * 0.5
    mask = np.array([0, 1, 1, 0, 0, 1, 0, 0, 1, 1], dtype=bool)
    assert mask_segments(mask, t) == [[0.5, 1.0], [2.5, 2.5], [4.0, 4.5]]
