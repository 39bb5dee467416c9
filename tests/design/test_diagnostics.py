"""Design diagnostics against numpy and statsmodels."""

import warnings

import numpy as np
import pytest
import statsmodels.api as sm
from numpy.testing import assert_allclose
from statsmodels.stats.outliers_influence import variance_inflation_factor

from fstats.design import build_design, design_image, design_table, parse_design
from fstats.design.diagnostics import (
    R2_WARN,
    collinearity_report,
    condition_number,
    nuisance_r2,
    variance_inflation,
)
from fstats.errors import DesignWarning
from fstats.inputs import Channel, Recording


def _matrix(seed=0):
    rng = np.random.default_rng(seed)
    n = 400
    a = rng.standard_normal(n)
    b = 0.7 * a + 0.5 * rng.standard_normal(n)
    c = rng.standard_normal(n)
    d = 0.3 * b - 0.6 * c + 0.4 * rng.standard_normal(n)
    return np.column_stack([a, b, np.ones(n), c, d])


def test_vif_matches_statsmodels():
    """Source: statsmodels.stats.outliers_influence.variance_inflation_factor on the
    design including its constant column."""
    x = _matrix()
    names = ("a", "b", "constant", "c", "d")
    kinds = ("task", "task", "constant", "drift", "short")
    vif = variance_inflation(x, names, kinds)
    for i, name in enumerate(names):
        if name != "constant":
            assert_allclose(vif[name], variance_inflation_factor(x, i), rtol=1e-8)


def test_condition_number_matches_numpy():
    """Source: numpy.linalg.cond (2-norm) of the column-normalised design."""
    x = _matrix(1)
    assert_allclose(condition_number(x), np.linalg.cond(x / np.linalg.norm(x, axis=0)), rtol=1e-8)


def test_nuisance_r2_matches_statsmodels_ols():
    """Source: statsmodels OLS rsquared of each task column on the nuisance columns + 1."""
    x = _matrix(2)
    kinds = ("task", "task", "constant", "drift", "short")
    r2 = nuisance_r2(x, kinds)
    for j, col in enumerate((0, 1)):
        expected = sm.OLS(x[:, col], sm.add_constant(x[:, 3:])).fit().rsquared
        assert_allclose(r2[j], expected, rtol=1e-8)


def test_collinearity_report_flags_thresholds():
    """Source: common practice - VIF > 10 / R² > 0.8 signal collinearity."""
    rng = np.random.default_rng(3)
    n = 500
    nuis = rng.standard_normal(n)
    task = nuis + 0.2 * rng.standard_normal(n)  # R² on nuisance ~ 0.96
    x = np.column_stack([task, np.ones(n), nuis])
    report = collinearity_report(x, ("task", "constant", "short:x"), ("task", "constant", "short"))
    assert report["nuisance_r2"]["task"] > R2_WARN
    assert any("nearly collinear" in w for w in report["warnings"])
    assert any("variance inflation" in w for w in report["warnings"])
    clean = np.column_stack([rng.standard_normal(n), np.ones(n), nuis])
    assert (
        collinearity_report(clean, ("task", "constant", "s"), ("task", "constant", "short"))[
            "warnings"
        ]
        == []
    )


def _recording(duration_s=600.0, fs=5.0):
    times = np.arange(0.0, duration_s, 1 / fs)
    rng = np.random.default_rng(0)
    return Recording(
        times_s=times,
        flow=1e-8 * (1 + 0.01 * rng.standard_normal((times.size, 2))),
        channels=(Channel("scalp", 1.0, True), Channel("deep", 3.0, False)),
    )


def test_slow_task_against_dense_drift_warns():
    """Source: common practice - one 300 s block in a 600 s recording is almost entirely
    explained by a cosine basis with a 40 s cutoff; build_design warns (DesignWarning)."""
    spec = parse_design(
        "timing:\n  cycle:\n    segments: [{label: task, length_s: 300},"
        " {label: pause, length_s: 300}]\n"
        "    repeats: 1\nbaseline: [pause]\nconditions: {task: {response: boxcar}}\n"
        "drift: {basis: cosine, cutoff_s: 40}\n"
    )
    with pytest.warns(DesignWarning) as caught:
        d = build_design(spec, _recording())
    assert any("nearly collinear" in str(w.message) for w in caught)
    assert any("variance inflation" in str(w.message) for w in caught)
    assert len(d.info["diagnostics"]["warnings"]) == 2


def test_demo_like_design_does_not_warn():
    """Source: common practice - 85 s cycles with a 170 s cutoff are well separated from drift."""
    spec = parse_design(
        "timing:\n  cycle:\n    segments: [{label: rest, length_s: 20}, {label: sub, length_s: 40},"
        " {label: rec, length_s: 25}]\nbaseline: [rest]\nconditions: {sub: {}, rec: {}}\n"
        "drift: {cutoff_s: 170}\n"
    )
    with warnings.catch_warnings():
        warnings.simplefilter("error", DesignWarning)
        d = build_design(spec, _recording())
    assert d.info["diagnostics"]["condition_number"] < 100


def test_table_and_image():
    """Source: common practice - tidy table = time_s + one column per regressor; the heat-map
    view scales each column into [-1, 1]."""
    spec = parse_design(
        "timing: {cycle: {segments: [{label: a, length_s: 30}]}}\nconditions: {a: {}}\n"
        "baseline: []\n".replace(
            "length_s: 30}]", "length_s: 30}, {label: b, length_s: 30}]"
        ).replace("baseline: []", "baseline: [b]")
    )
    d = build_design(spec, _recording())
    table = design_table(d)
    assert list(table.columns) == ["time_s", *d.names]
    assert_allclose(table["time_s"], d.times_s)
    image = design_image(d)
    assert image.values.shape == d.values.shape
    assert_allclose(np.abs(image.values).max(axis=0), 1.0)
    assert image.kinds == d.kinds


def test_vif_infinite_for_constant_or_duplicated_columns():
    """Source: closed form - R² = 1 for an exact copy, so VIF = 1/(1-R²) is infinite; a
    column without variance has no defined VIF (reported as inf)."""
    x = _matrix(4)
    x = np.column_stack([x, x[:, 0], np.full(x.shape[0], 2.0)])
    names = ("a", "b", "constant", "c", "d", "a_copy", "flat")
    kinds = ("task", "task", "constant", "drift", "short", "short", "aux")
    vif = variance_inflation(x, names, kinds)
    assert vif["a_copy"] == np.inf and vif["flat"] == np.inf
    assert np.isfinite(vif["c"])
    assert_allclose(vif["c"], variance_inflation_factor(x[:, :5], 3), rtol=1e-6)
