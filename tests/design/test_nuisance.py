"""Nuisance regressors: aux signals, motion (accelerometer, spikes), helpers."""

from dataclasses import replace

import numpy as np
import pytest
from numpy.testing import assert_allclose
from scipy import stats

from fstats.design import build_design, parse_design
from fstats.design.nuisance import lagged, spike_indicators, standardise
from fstats.inputs import AuxSignal, Channel, Recording


def test_standardise_matches_scipy_zscore_and_fills_gaps_with_zero():
    """Source: scipy.stats.zscore(nan_policy='omit') - missing samples become 0 (the mean)."""
    rng = np.random.default_rng(0)
    x = rng.standard_normal(200) * 3 + 7
    x[[5, 50]] = np.nan
    z = standardise(x)
    assert_allclose(z[np.isfinite(x)], stats.zscore(x, nan_policy="omit")[np.isfinite(x)])
    assert z[5] == 0.0 and z[50] == 0.0
    assert_allclose(standardise(np.full(10, 2.0)), 0.0)


def test_lagged_interpolates_fractional_delays():
    """Source: closed form - a linear ramp delayed by 0.25 s is the ramp minus 0.25 (0 before
    the start)."""
    t = np.arange(0.0, 10.0, 0.5)
    y = lagged(t.copy(), t, 0.25)
    assert_allclose(y[1:], t[1:] - 0.25)
    assert y[0] == 0.0


def test_spike_indicators_find_injected_jumps():
    """Source: common practice - jumps beyond threshold robust sd (MAD/0.6745) of the first
    difference mark motion; each spike gets its own indicator column."""
    rng = np.random.default_rng(1)
    x = rng.standard_normal(2000) * 0.1
    x[[300, 1200]] += 5.0
    cols = spike_indicators(x, threshold_z=8.0, max_spikes=10)
    hits = np.flatnonzero(cols.sum(axis=1))
    assert set(hits) >= {300, 1200}
    assert set(hits) <= {300, 301, 1200, 1201}  # the jump in and the jump back
    assert np.all(cols.sum(axis=0) == 1)
    assert spike_indicators(x, threshold_z=8.0, max_spikes=2).shape[1] == 2


def _recording():
    rng = np.random.default_rng(2)
    t = np.arange(0.0, 300.0, 0.1)
    t_aux = np.arange(0.0, 300.0, 0.04)
    accel = rng.standard_normal((t_aux.size, 3)) * 0.01
    accel[(t_aux > 150) & (t_aux < 150.2), :] += 3.0
    aux = {
        "resp": AuxSignal("resp", t_aux, np.sin(2 * np.pi * 0.25 * t_aux)),
        **{f"accel_{a}": AuxSignal(f"accel_{a}", t_aux, accel[:, i]) for i, a in enumerate("xyz")},
    }
    return Recording(
        times_s=t,
        flow=1e-8 * (1 + 0.01 * rng.standard_normal((t.size, 2))),
        channels=(Channel("scalp", 1.0, True), Channel("deep", 3.0, False)),
        aux=aux,
    )


DESIGN = """\
timing: {cycle: {segments: [{label: rest, length_s: 20}, {label: task, length_s: 20}]}}
baseline: [rest]
conditions: {task: {}}
nuisance:
  aux:
    - {signal: resp, lags_s: [1.0]}
  motion:
    accelerometer: [accel_x, accel_y, accel_z]
    spikes: {detect_in: accelerometer, threshold_z: 10}
"""


def test_aux_and_motion_columns():
    """Source: numpy.interp + scipy.stats.zscore - aux columns are the aux signal linearly
    interpolated to the flow time base and z-scored; a 3 g jolt at 150 s gives spike
    indicators there; accelerometer axes become z-scored motion columns."""
    rec = _recording()
    d = build_design(parse_design(DESIGN), rec)
    resp = rec.aux["resp"]
    expected = stats.zscore(np.interp(rec.times_s, resp.times_s, resp.values))
    assert_allclose(d.column("aux:resp"), expected, atol=1e-12)
    assert_allclose(d.column("aux:resp@+1s")[10:], expected[:-10], atol=1e-12)
    kinds = dict(zip(d.names, d.kinds, strict=True))
    assert kinds["motion:accel_x"] == "motion"
    spikes = [n for n in d.names if n.startswith("motion:spike")]
    assert spikes
    spike_times = [d.times_s[np.argmax(d.column(n))] for n in spikes]
    assert all(149.5 <= s <= 150.5 for s in spike_times)


def test_spikes_from_a_flow_channel_and_unknown_channel_error():
    """Source: common practice - spikes may be detected in a channel's flow; an unknown
    channel name is an InputError naming the design key."""
    rec = _recording()
    flow = rec.flow.copy()
    flow[1000, 1] += 1e-7
    text = DESIGN.replace("detect_in: accelerometer", "detect_in: deep")
    d = build_design(parse_design(text), replace(rec, flow=flow))
    cols = [d.column(n) for n in d.names if n.startswith("motion:spike")]
    assert any(c[1000] == 1.0 for c in cols)
    from fstats.errors import InputError

    with pytest.raises(InputError, match="nuisance.motion.spikes.detect_in"):
        build_design(
            parse_design(DESIGN.replace("detect_in: accelerometer", "detect_in: dep")), rec
        )
