"""Tests of fstats.fit.glm (SubjectGLM over channels, failures, table) and fstats.fit.results."""

import json
import warnings
from dataclasses import replace

import numpy as np
import pytest
import statsmodels.api as sm
from numpy.testing import assert_allclose

from fstats.errors import FitWarning, InputError
from fstats.fit import (
    RESULT_COLUMNS,
    ChannelFailure,
    ChannelFit,
    SubjectGLM,
    read_subject_results,
    write_subject_results,
)

from ._synthetic import block_recording


def _fit(rec, design, **kw):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", FitWarning)
        return SubjectGLM(**kw).fit(rec, design)


def test_table_has_contract_columns_and_rows():
    """Source: common practice - CONTRACTS §5 column list, one row per channel x term."""
    rec, design = block_recording()
    table = _fit(rec, design).table()
    assert tuple(table.columns) == RESULT_COLUMNS
    assert len(table) == 3 * (design.n_regressors + len(design.contrasts))
    assert set(table.term_kind) == {"regressor", "contrast", "F"}
    task = table[(table.term == "task") & (table.term_kind == "regressor")]
    assert (task.condition == "task").all() and (task.status == "ok").all()


def test_ols_table_matches_statsmodels_and_percent_is_relative_to_baseline():
    """Source: statsmodels OLS (estimate, se, df, p); percent = 100 × estimate / baseline,
    baseline = mean fitted flow with the task column set to zero (closed form here: the
    intercept plus the mean of the drift part)."""
    rec, design = block_recording(1)
    table = _fit(rec, design, method="ols").table()
    y = rec.channel_flow("frontal_a")
    ref = sm.OLS(y, design.values).fit()
    row = table[(table.channel == "frontal_a") & (table.term == "task")].iloc[0]
    assert_allclose(row.estimate, ref.params[0], rtol=1e-8)
    assert_allclose(row.se, ref.bse[0], rtol=1e-8)
    assert_allclose(row.p, ref.pvalues[0], rtol=1e-6)
    assert row.df == ref.df_resid
    baseline = np.mean(design.values[:, 1:] @ ref.params[1:])
    assert_allclose(row.estimate_pct, 100 * ref.params[0] / baseline, rtol=1e-8)
    assert abs(row.estimate_pct - 10.0) < 1.5  # simulated effect 10 % of baseline


def test_default_fit_recovers_effect_with_honest_interval():
    """Source: common practice - AR-IRLS on AR(1) noise: the 95 % CI covers the true
    10 % effect and the null channel's p-value is not tiny."""
    rec, design = block_recording(2)
    table = _fit(rec, design).table()
    row = table[(table.channel == "frontal_a") & (table.term == "task")].iloc[0]
    assert row.ci_low_pct < 10.0 < row.ci_high_pct
    assert row.method == "ar-irls" and row.ar_order >= 1
    null = table[(table.channel == "frontal_b") & (table.term == "task")].iloc[0]
    assert null.p > 1e-3


def test_degenerate_channels_give_failure_rows_not_crashes():
    """Source: common practice - constant and all-NaN channels are reported per channel."""
    rec, design = block_recording(3)
    flow = rec.flow.copy()
    flow[:, 0] = 2e-8
    flow[:, 2] = np.nan
    rec = replace(rec, flow=flow)
    with pytest.warns(FitWarning, match="not fitted"):
        fit = SubjectGLM().fit(rec, design)
    assert isinstance(fit.channel_fits["scalp"], ChannelFailure)
    assert isinstance(fit.channel_fits["frontal_a"], ChannelFit)
    table = fit.table()
    bad = table[table.channel == "frontal_b"]
    assert (bad.status == "no valid samples (all NaN)").all()
    assert bad.estimate.isna().all() and len(bad) == 1 + len(design.contrasts)
    assert (table[table.channel == "scalp"].status == "constant flow (zero variance)").all()


def test_singular_and_too_wide_designs_fail_per_channel():
    """Source: common practice - rank-deficient or over-wide designs cannot be estimated."""
    rec, design = block_recording(4)
    dup = np.column_stack([design.values, design.values[:, 0]])
    singular = replace(
        design,
        values=dup,
        names=design.names + ("copy",),
        kinds=design.kinds + ("task",),
        contrasts=(),
    )
    fit = _fit(rec, singular)
    assert all("rank deficient" in f.reason for f in fit.channel_fits.values())
    short_rec = replace(rec, times_s=rec.times_s[:4], flow=rec.flow[:4])
    short_design = replace(design, values=design.values[:4], times_s=design.times_s[:4])
    fit = _fit(short_rec, short_design, block_averages=False)
    assert all("valid samples for 5" in f.reason for f in fit.channel_fits.values())


def test_bad_arguments_raise_input_error():
    """Source: common practice - bad settings and mismatched inputs are one-line errors."""
    rec, design = block_recording(5)
    with pytest.raises(InputError, match="did you mean 'ar-irls'"):
        SubjectGLM(method="ar-irl")
    with pytest.raises(InputError, match="design matrix rows"):
        SubjectGLM().fit(rec, replace(design, values=design.values[:-1]))
    with pytest.raises(InputError, match="frontal_c"):
        SubjectGLM().fit(rec, design, channels=["frontal_c"])


def test_diagnostics_show_whitening():
    """Source: common practice - AR(1) residuals have DW ≈ 2(1 - 0.7) before whitening and
    ≈ 2 after; lag-1 autocorrelation drops from about 0.7 to about 0."""
    rec, design = block_recording(6)
    fit = _fit(rec, design).channel_fits["frontal_b"]
    d = fit.diagnostics
    assert abs(d["durbin_watson_before"] - 0.6) < 0.15
    assert abs(d["durbin_watson"] - 2.0) < 0.15
    assert d["acf_before"][1] > 0.6 and abs(d["acf_after"][1]) < 0.1
    assert fit.weights.shape == (rec.n_times,) and fit.fitted.shape == (rec.n_times,)
    assert 0 <= d["r2"] <= 1


def test_write_and_read_results_roundtrip(tmp_path):
    """Source: common practice - the table read back equals the table written."""
    rec, design = block_recording(7)
    fit = _fit(rec, design)
    src = tmp_path / "sub-01_task-x_flow.tsv"
    src.write_text("time\n0\n")
    tsv, sidecar = write_subject_results(
        fit, tmp_path / "out", "sub-01_task-x", provenance={"inputs": [str(src)]}
    )
    back = read_subject_results(tsv)
    table = fit.table()
    assert list(back.columns) == list(RESULT_COLUMNS)
    assert_allclose(back.estimate.to_numpy(float), table.estimate.to_numpy(float), rtol=1e-12)
    assert (back.condition == table.condition).all() and back.session.isna().all()
    meta = json.loads(sidecar.read_text())
    for key in (
        "fstats_version",
        "created",
        "design",
        "options",
        "packages",
        "inputs",
        "subject",
        "session",
    ):
        assert key in meta
    assert meta["options"]["method"] == "ar-irls"
    assert len(meta["inputs"][str(src)]) == 64
    assert not list((tmp_path / "out").glob(".*tmp"))
    assert (tmp_path / "out" / "sub-01_task-x_timecourses.tsv").is_file()
