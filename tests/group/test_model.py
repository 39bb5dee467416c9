"""GroupModel end to end on subject tables with the CONTRACTS §5 columns."""

import numpy as np
import pandas as pd
import pytest
import statsmodels.formula.api as smf
from numpy.testing import assert_allclose
from scipy import stats
from statsmodels.stats.meta_analysis import combine_effects

from fstats.group import TABLE_COLUMNS, GroupModel


def _row(result, channel="frontal_a", term="subtract"):
    table = result.table()
    rows = table[(table["channel"] == channel) & (table["term"] == term)]
    assert len(rows) == 1
    return rows.iloc[0]


def _values(tables, channel="frontal_a", term="subtract", column="estimate_pct"):
    sel = tables[(tables["channel"] == channel) & (tables["term"] == term)]
    return sel.groupby("subject", sort=True)[column].mean()


def test_table_columns(cohort):
    """Source: CONTRACTS §7 - the group table carries the agreed columns."""
    tables, participants = cohort
    table = GroupModel().fit(tables, participants).table()
    assert list(table.columns) == list(TABLE_COLUMNS)
    assert set(table["channel"]) == {"frontal_a", "frontal_b"}  # short channel left out
    assert set(table["term"]) == {"subtract", "recover"}


def test_one_sample_equals_scipy_ttest_1samp(cohort):
    """Source: scipy.stats.ttest_1samp on the subject estimates (REFERENCE-CHECKS 4.1)."""
    tables, participants = cohort
    row = _row(GroupModel().fit(tables, participants))
    ref = stats.ttest_1samp(_values(tables).to_numpy(), 0.0)
    assert_allclose(
        [row["stat"], row["p"], row["df"]], [ref.statistic, ref.pvalue, ref.df], rtol=1e-12
    )


def test_runs_are_averaged_within_subject(cohort_factory):
    """Source: scipy.stats.ttest_1samp on per-subject run means (summary-statistics
    approach, common practice)."""
    tables, participants = cohort_factory(np.random.default_rng(3), runs=3)
    row = _row(GroupModel().fit(tables, participants))
    ref = stats.ttest_1samp(_values(tables).to_numpy(), 0.0)
    assert row["n_subjects"] == 16
    assert_allclose(row["stat"], ref.statistic, rtol=1e-12)


@pytest.mark.parametrize("equal_variance", [False, True])
def test_two_sample_equals_scipy_ttest_ind(cohort, equal_variance):
    """Source: scipy.stats.ttest_ind, Welch (equal_var=False) and pooled (True)."""
    tables, participants = cohort
    res = GroupModel(kind="two-sample", equal_variance=equal_variance).fit(tables, participants)
    row = _row(res)
    values = _values(tables)
    group = participants.set_index("participant_id").loc[values.index, "group"]
    ref = stats.ttest_ind(
        values[group == "older"], values[group == "younger"], equal_var=equal_variance
    )
    assert row["comparison"] == "older - younger"
    assert_allclose(
        [row["stat"], row["p"], row["df"]], [ref.statistic, ref.pvalue, ref.df], rtol=1e-12
    )


def test_dersimonian_laird_equals_combine_effects(cohort):
    """Source: statsmodels combine_effects(method_re='dl') on the subject estimates and se²."""
    tables, participants = cohort
    row = _row(
        GroupModel(weighting="dersimonian-laird", knapp_hartung=False).fit(tables, participants)
    )
    sel = tables[(tables["channel"] == "frontal_a") & (tables["term"] == "subtract")]
    ref = combine_effects(
        sel["estimate_pct"].to_numpy(), sel["se_pct"].to_numpy() ** 2, method_re="dl"
    )
    assert_allclose(
        [row["estimate"], row["se"], row["tau2"], row["i2"]],
        [ref.mean_effect_re, ref.sd_eff_w_re, ref.tau2, ref.i2],
        rtol=1e-10,
    )
    assert row["stat_kind"] == "z"


def test_raw_units_use_the_raw_columns(cohort):
    """Source: CONTRACTS §5 - estimate/se are the raw-unit columns; scipy ttest_1samp."""
    tables, participants = cohort
    row = _row(GroupModel(units="raw").fit(tables, participants))
    ref = stats.ttest_1samp(_values(tables, column="estimate").to_numpy(), 0.0)
    assert row["units"] == "raw"
    assert_allclose(row["estimate"], np.mean(_values(tables, column="estimate")), rtol=1e-12)
    assert_allclose(row["stat"], ref.statistic, rtol=1e-10)


def test_paired_equals_scipy_ttest_rel(cohort):
    """Source: scipy.stats.ttest_rel (paired t test of two conditions within subjects)."""
    tables, participants = cohort
    res = GroupModel(kind="paired", pair=("subtract", "recover")).fit(tables, participants)
    row = _row(res, term="subtract - recover")
    ref = stats.ttest_rel(_values(tables), _values(tables, term="recover"))
    assert_allclose([row["stat"], row["p"]], [ref.statistic, ref.pvalue], rtol=1e-12)


def test_interaction_equals_ttest_ind_on_differences(cohort):
    """Source: scipy.stats.ttest_ind on within-subject differences (group x condition
    interaction as a two-sample test of differences, common practice)."""
    tables, participants = cohort
    res = GroupModel(kind="interaction", pair=("subtract", "recover")).fit(tables, participants)
    row = _row(res, term="subtract - recover")
    diff = _values(tables) - _values(tables, term="recover")
    group = participants.set_index("participant_id").loc[diff.index, "group"]
    ref = stats.ttest_ind(diff[group == "older"], diff[group == "younger"], equal_var=False)
    assert_allclose([row["stat"], row["p"]], [ref.statistic, ref.pvalue], rtol=1e-12)


def test_mixed_model_equals_direct_statsmodels_call(cohort_factory):
    """Source: statsmodels MixedLM via smf.mixedlm(...).fit(reml=True), called directly
    (REFERENCE-CHECKS 4.3)."""
    tables, participants = cohort_factory(np.random.default_rng(5), runs=3)
    res = GroupModel(kind="mixed", formula="effect ~ group + age", mixed_reference="normal").fit(
        tables, participants
    )
    table = res.table()
    sel = tables[(tables["channel"] == "frontal_a") & (tables["term"] == "subtract")]
    data = sel.merge(participants, left_on="subject", right_on="participant_id")
    data = data.rename(columns={"estimate_pct": "effect"})
    ref = smf.mixedlm("effect ~ group + age", data, groups=data["participant_id"]).fit(reml=True)
    ours = table[(table["channel"] == "frontal_a") & (table["term"] == "subtract")]
    ours = ours.set_index("comparison")
    for name in ("Intercept", "group[T.younger]", "age"):
        assert_allclose(ours.loc[name, "estimate"], ref.fe_params[name], rtol=1e-8)
        assert_allclose(ours.loc[name, "se"], ref.bse_fe[name], rtol=1e-6)
        assert_allclose(ours.loc[name, "p"], ref.pvalues[name], rtol=1e-6)
    assert np.isnan(ours.loc["Intercept", "p_adjusted"])  # intercept not in the family
    # default t reference: same statistic, t on n_subjects - n_fixed = 16 - 3 df
    t_table = GroupModel(kind="mixed", formula="effect ~ group + age").fit(tables, participants)
    t_rows = t_table.table().set_index(["channel", "term", "comparison"])
    row = t_rows.loc[("frontal_a", "subtract", "age")]
    assert row["df"] == 13
    assert_allclose(row["p"], 2 * stats.t.sf(abs(ref.tvalues["age"]), 13), rtol=1e-6)


def test_mixed_balanced_intercept_equals_ttest_on_subject_means(cohort_factory):
    """Source: REFERENCE-CHECKS 4.3 - balanced random intercept: fixed intercept = grand
    mean and its t equals ttest_1samp on subject means (rtol 1e-8 on the estimate, 1e-3 t)."""
    tables, participants = cohort_factory(np.random.default_rng(6), runs=4, n_per_group=6)
    res = GroupModel(kind="mixed").fit(tables, participants)
    row = _row(res)
    means = _values(tables)
    ref = stats.ttest_1samp(means.to_numpy(), 0.0)
    assert_allclose(row["estimate"], means.mean(), rtol=1e-8)
    assert_allclose(row["stat"], ref.statistic, rtol=1e-3)


def test_correction_across_channels_and_terms(cohort):
    """Source: Benjamini & Hochberg (1995) applied to the table's p-values
    (statsmodels multipletests as the reference)."""
    from statsmodels.stats.multitest import multipletests

    tables, participants = cohort
    for ours, theirs in (("fdr", "fdr_bh"), ("holm", "holm"), ("bonferroni", "bonferroni")):
        table = GroupModel(correction=ours).fit(tables, participants).table()
        assert_allclose(table["p_adjusted"], multipletests(table["p"], 0.05, theirs)[1])
        assert (table["reject"] == (table["p_adjusted"] <= 0.05)).all()


def test_permutation_columns(cohort):
    """Source: common practice - sign-flip p-values lie in (0, 1] and the max-statistic
    adjusted value is not below the unadjusted one."""
    tables, participants = cohort
    res = GroupModel(n_permutations=2000, max_statistic=True).fit(tables, participants)
    table = res.table()
    assert table["p_permutation"].between(0, 1).all()
    assert (table["p_permutation_adjusted"] >= table["p_permutation"] - 1e-12).all()
    assert res.info["permutation"]["n_flips"] == 2000


def test_influence_flags_an_outlier(cohort):
    """Source: Belsley, Kuh & Welsch (1980) DFBETAS > 2/sqrt(n) rule; a subject 10 sd out
    must be flagged, and the LOO estimate equals the mean of the other subjects."""
    tables, participants = cohort
    tables = tables.copy()
    hit = (
        (tables["subject"] == "sub-03")
        & (tables["channel"] == "frontal_a")
        & (tables["term"] == "subtract")
    )
    tables.loc[hit, "estimate_pct"] += 60.0
    res = GroupModel().fit(tables, participants)
    assert "sub-03" in _row(res)["influential"].split("; ")
    inf = res.influence
    own = inf[(inf["channel"] == "frontal_a") & (inf["term"] == "subtract")].set_index(
        "participant_id"
    )
    others = _values(tables).drop("sub-03")
    assert_allclose(own.loc["sub-03", "estimate_without"], others.mean(), rtol=1e-12)


def test_subject_estimates_for_forest_plots(cohort):
    """Source: common practice - weights of a weighted pooling sum to 1 per test."""
    tables, participants = cohort
    res = GroupModel(weighting="reml").fit(tables, participants)
    est = res.subject_estimates
    sums = est.groupby(["channel", "term"])["weight"].sum()
    assert_allclose(sums, 1.0)
    assert len(est) == 16 * 4


def test_inputs_are_not_modified(cohort):
    """Source: common practice - fit leaves its arguments alone."""
    tables, participants = cohort
    before = tables.copy(), participants.copy()
    GroupModel(kind="two-sample").fit(tables, participants)
    pd.testing.assert_frame_equal(tables, before[0])
    pd.testing.assert_frame_equal(participants, before[1])


def test_weighted_two_sample_separate_tau2_from_combine_effects(cohort):
    """Source: statsmodels combine_effects(method_re='dl') run on each group: the difference
    of the two random-effects means, with se = sqrt(se1² + se2²) and a normal reference."""
    tables, participants = cohort
    res = GroupModel(kind="two-sample", weighting="dersimonian-laird", knapp_hartung=False)
    row = _row(res.fit(tables, participants))
    sel = tables[(tables["channel"] == "frontal_a") & (tables["term"] == "subtract")]
    group = sel["subject"].map(participants.set_index("participant_id")["group"])
    refs = [
        combine_effects(
            sel.loc[group == g, "estimate_pct"].to_numpy(),
            sel.loc[group == g, "se_pct"].to_numpy() ** 2,
            method_re="dl",
        )
        for g in ("older", "younger")
    ]
    se = np.hypot(refs[0].sd_eff_w_re, refs[1].sd_eff_w_re)
    assert_allclose(row["estimate"], refs[0].mean_effect_re - refs[1].mean_effect_re, rtol=1e-10)
    assert_allclose(row["se"], se, rtol=1e-10)
    assert_allclose(row["p"], 2 * stats.norm.sf(abs(row["estimate"]) / se), rtol=1e-8)
