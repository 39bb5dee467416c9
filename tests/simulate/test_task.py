"""Task timelines and the simulator's own response kernels."""

import numpy as np
import pytest
from scipy import stats

from fstats.simulate.task import (
    block_timeline,
    cerebral_kernel,
    event_timeline,
    evoked_response,
    scalp_kernel,
)


def test_block_timeline_follows_the_scenario_cycle():
    """Source: demo scenario (CONTRACTS §3): rest 20 s, subtract 40 s, recover 25 s, repeated
    for the whole recording; the last block is cut at the end (design YAML cycle rule)."""
    timing = block_timeline(900.0)
    subtract = timing.select("subtract")
    n_blocks = int(np.ceil((900 - 20) / 85))  # every block starting before 900 s: 11
    np.testing.assert_allclose(subtract.onsets_s, 20.0 + 85.0 * np.arange(n_blocks))
    np.testing.assert_allclose(subtract.durations_s[:-1], 40.0)
    assert subtract.durations_s[-1] == pytest.approx(900.0 - subtract.onsets_s[-1])
    recover = timing.select("recover")
    np.testing.assert_allclose(recover.onsets_s, subtract.onsets_s[: len(recover)] + 40.0)
    np.testing.assert_allclose(recover.durations_s, 25.0)
    assert np.all(timing.onsets_s + timing.durations_s <= 900.0 + 1e-9)
    # a recording ending in rest keeps whole cycles only
    whole = block_timeline(20.0 + 85.0 * 3)
    assert whole.conditions == ("subtract", "recover") * 3


def test_event_timeline_intervals_are_jittered_within_range():
    """Source: the demo scenario (CONTRACTS §3): 1 s cues, jittered ISI of about 12-20 s."""
    timing = event_timeline(600.0, np.random.default_rng(0))
    isi = np.diff(timing.onsets_s)
    assert isi.min() >= 12.0 and isi.max() <= 20.0 and isi.std() > 1.0
    assert set(timing.conditions) == {"cue"}
    np.testing.assert_allclose(timing.durations_s, 1.0)
    assert timing.onsets_s[-1] <= 580.0


@pytest.mark.parametrize("sfreq_hz", [10.0, 20.0, 50.0])
def test_cerebral_kernel_unit_area_and_early_peak(sfreq_hz):
    """Source: REFERENCE-CHECKS 1.3 (unit area, h(0) = 0) and 1.5 (CBF peaks ~1 s before BOLD).

    The canonical BOLD double gamma peaks at 5.0 s (REFERENCE-CHECKS 1.2, scipy gamma pdf
    computed here); the simulator's flow kernel peaks near 4.5 s, at least 0.2 s earlier.
    """
    h = cerebral_kernel(sfreq_hz, 4.5)
    t = np.arange(h.size) / sfreq_hz
    assert h.sum() / sfreq_hz == pytest.approx(1.0, rel=1e-12)
    assert h[0] == 0.0
    bold = stats.gamma.pdf(t, 6) - stats.gamma.pdf(t, 16) / 6
    assert t[np.argmax(bold)] == pytest.approx(5.0, abs=1 / sfreq_hz)
    assert t[np.argmax(h)] == pytest.approx(4.5, abs=0.15)
    assert t[np.argmax(bold)] - t[np.argmax(h)] >= 0.2
    assert h.min() > -0.1 * h.max()  # little undershoot
    assert abs(h[-1]) < 1e-3 * h.max()


def test_scalp_kernel_is_later_and_positive():
    """Source: closed form - the gamma density of shape 3 and scale θ has its mode at 2θ."""
    h = scalp_kernel(20.0, 4.5, 2.0)
    t = np.arange(h.size) / 20.0
    assert t[np.argmax(h)] == pytest.approx(8.5, abs=0.05)
    assert h.min() >= 0.0 and h.sum() / 20.0 == pytest.approx(1.0)


def test_long_block_plateaus_at_the_gain():
    """Source: REFERENCE-CHECKS 1.3 - a unit-area kernel times a long boxcar plateaus at 1."""
    times = np.arange(0, 300, 0.05)
    timing = block_timeline(300.0, rest_s=20.0, subtract_s=120.0, recover_s=25.0)
    response = evoked_response(times, timing, {"subtract": 0.15}, cerebral_kernel(20.0))
    plateau = response[(times > 100) & (times < 140)]
    np.testing.assert_allclose(plateau, 0.15, rtol=2e-3)
    assert np.all(response[times < 20.0] == 0.0)
