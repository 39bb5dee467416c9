"""Contrast expansion over design-matrix columns, including FIR conditions."""

import numpy as np
from numpy.testing import assert_allclose

from fstats.design import build_design, parse_design
from fstats.inputs import Channel, Recording

DESIGN = """\
timing:
  cycle:
    segments: [{label: rest, length_s: 20}, {label: a, length_s: 10}, {label: b, length_s: 10}]
baseline: [rest]
conditions:
  a: {response: {model: fir, bin_s: 2, n_bins: 5}}
  b: {response: canonical, derivatives: [dispersion]}
drift: {basis: none}
contrasts:
  a_mean: {weights: {a: 1}}
  a_vs_b: {weights: {a: 1, b: -1}}
  a_shape: {rows: [a]}
  mixed: {rows: [a_vs_b, {b_dd: 2}, b]}
"""


def _recording():
    t = np.arange(0.0, 400.0, 0.5)
    return Recording(
        times_s=t,
        flow=np.ones((t.size, 1)) + 0.01 * np.random.default_rng(0).standard_normal((t.size, 1)),
        channels=(Channel("deep", 3.0, False),),
    )


def test_fir_and_derivative_contrast_rows():
    """Source: common practice - a condition weight on an FIR condition is its mean over
    bins (w / n_bins per bin); in an F test an FIR condition gives one row per bin; explicit
    column names (b_dd) address derivative columns."""
    d = build_design(parse_design(DESIGN), _recording())
    assert d.conditions["a"] == tuple(f"a_fir{j:02d}" for j in range(5))
    assert_allclose(d.fir_times_s["a"], [0, 2, 4, 6, 8])
    con = {c.name: c for c in d.contrasts}
    idx = {n: i for i, n in enumerate(d.names)}
    row = con["a_mean"].weights[0]
    assert_allclose(row[[idx[f"a_fir{j:02d}"] for j in range(5)]], 0.2)
    assert_allclose(row.sum(), 1.0)
    row = con["a_vs_b"].weights[0]
    assert_allclose(row[idx["b"]], -1.0)
    assert_allclose(row[idx["b_dd"]], 0.0)
    assert con["a_shape"].kind == "F" and con["a_shape"].weights.shape == (5, d.n_regressors)
    assert_allclose(con["a_shape"].weights[:, [idx[f"a_fir{j:02d}"] for j in range(5)]], np.eye(5))
    mixed = con["mixed"].weights
    assert mixed.shape == (3, d.n_regressors)
    assert_allclose(mixed[0], con["a_vs_b"].weights[0])
    assert mixed[1, idx["b_dd"]] == 2.0 and mixed[2, idx["b"]] == 1.0
