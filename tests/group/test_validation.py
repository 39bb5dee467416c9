"""Bad or incomplete inputs: clear InputErrors or exclusions listed in the output."""

import numpy as np
import pandas as pd
import pytest

from fstats.errors import InputError
from fstats.group import GroupModel


def _reasons(result, pid):
    return [e["reason"] for e in result.exclusions if e["participant_id"] == pid]


def test_no_matching_ids_is_an_error(cohort):
    """Source: common practice - IDs that never match are a naming mistake, not data."""
    tables, participants = cohort
    participants = participants.assign(participant_id=participants["participant_id"].str[4:])
    with pytest.raises(InputError, match="participant_id.*sub-"):
        GroupModel(kind="two-sample").fit(tables, participants)


def test_unmatched_ids_are_listed_exclusions(cohort):
    """Source: common practice - a subject without a participants row is excluded and said so."""
    tables, participants = cohort
    participants = participants[participants["participant_id"] != "sub-02"]
    extra = participants.iloc[:1].assign(participant_id="sub-99")
    participants = pd.concat([participants, extra], ignore_index=True)
    res = GroupModel(kind="two-sample").fit(tables, participants)
    assert _reasons(res, "sub-02") == ["no row in participants.tsv"]
    assert _reasons(res, "sub-99") == ["in participants.tsv but no subject results"]
    row = res.table().iloc[0]
    assert row["n_subjects"] == 15 and "sub-02" in row["excluded"]
    assert "sub-99" not in row["excluded"]


def test_missing_covariate_column_suggests_name(cohort):
    """Source: common practice - a typo in a covariate name gets a 'did you mean'."""
    tables, participants = cohort
    with pytest.raises(InputError, match="did you mean 'age'"):
        GroupModel(kind="mixed", formula="effect ~ group + agee").fit(tables, participants)


def test_missing_covariate_value_excludes_subject(cohort):
    """Source: common practice - 'n/a' in participants.tsv excludes that subject, listed."""
    tables, participants = cohort
    participants = participants.copy()
    participants.loc[participants["participant_id"] == "sub-04", "age"] = np.nan
    res = GroupModel(kind="mixed", formula="effect ~ age").fit(tables, participants)
    assert _reasons(res, "sub-04") == ["missing value for 'age' in participants.tsv"]
    assert (res.table()["n_subjects"] == 15).all()


def test_constant_covariate_is_an_error(cohort):
    """Source: common practice - a covariate that does not vary makes the design singular."""
    tables, participants = cohort
    participants = participants.assign(age=40.0)
    with pytest.raises(InputError, match="column 'age'.*two different values"):
        GroupModel(kind="mixed", formula="effect ~ group + age").fit(tables, participants)


def test_group_with_one_subject_is_an_error(cohort):
    """Source: common practice - a group variance needs two subjects."""
    tables, participants = cohort
    participants = participants.copy()
    participants.loc[participants["participant_id"] == "sub-01", "group"] = "middle"
    with pytest.raises(InputError, match="group 'middle' with 1 subject"):
        GroupModel(kind="two-sample").fit(tables, participants)


def test_more_than_two_groups_need_naming(cohort):
    """Source: common practice - which two groups to compare must be explicit."""
    tables, participants = cohort
    participants = participants.copy()
    participants.loc[participants["participant_id"].isin(["sub-01", "sub-02"]), "group"] = "mid"
    with pytest.raises(InputError, match="exactly two groups"):
        GroupModel(kind="two-sample").fit(tables, participants)
    res = GroupModel(kind="two-sample", groups=("older", "younger")).fit(tables, participants)
    assert "not one of the compared groups" in _reasons(res, "sub-01")[0]


def test_subject_lacking_a_channel_is_listed(cohort):
    """Source: common practice - a missing channel is an exclusion for that channel only."""
    tables, participants = cohort
    tables = tables[~((tables["subject"] == "sub-05") & (tables["channel"] == "frontal_b"))]
    res = GroupModel().fit(tables, participants)
    table = res.table().set_index(["channel", "term"])
    assert table.loc[("frontal_b", "subtract"), "n_subjects"] == 15
    assert table.loc[("frontal_a", "subtract"), "n_subjects"] == 16
    assert table.loc[("frontal_b", "subtract"), "excluded"] == "sub-05"
    assert any("no row for channel 'frontal_b'" in r for r in _reasons(res, "sub-05"))


def test_failed_subject_fit_is_listed(cohort):
    """Source: CONTRACTS §5 - status other than 'ok' means the row's numbers are unusable."""
    tables, participants = cohort
    tables = tables.copy()
    bad = (tables["subject"] == "sub-06") & (tables["channel"] == "frontal_a")
    tables.loc[bad, "status"] = "AR fit did not converge"
    tables.loc[bad, ["estimate_pct", "se_pct"]] = np.nan
    res = GroupModel(weighting="dersimonian-laird").fit(tables, participants)
    assert "subject fit: AR fit did not converge" in _reasons(res, "sub-06")


def test_one_subject_left_on_a_channel_gives_a_status(cohort):
    """Source: common practice - an untestable row says why instead of disappearing."""
    tables, participants = cohort
    keep = (tables["channel"] != "frontal_b") | (tables["subject"] == "sub-01")
    res = GroupModel().fit(tables[keep], participants)
    row = res.table().set_index(["channel", "term"]).loc[("frontal_b", "subtract")]
    assert row["status"].startswith("too few subjects") and np.isnan(row["p"])


def test_unknown_term_and_bad_settings(cohort):
    """Source: common practice - choices are checked with a suggestion."""
    tables, participants = cohort
    with pytest.raises(InputError, match="did you mean 'subtract'"):
        GroupModel(terms=("subtrakt",)).fit(tables, participants)
    with pytest.raises(InputError, match="did you mean 'holm'"):
        GroupModel(correction="hollm")
    with pytest.raises(InputError, match="pair"):
        GroupModel(kind="paired")
    with pytest.raises(InputError, match="columns"):
        GroupModel().fit(tables.drop(columns=["se_pct"]), participants)


def test_two_sample_without_participants_is_an_error(cohort):
    """Source: common practice - groups come from participants.tsv."""
    tables, _ = cohort
    with pytest.raises(InputError, match="participants"):
        GroupModel(kind="two-sample").fit(tables, None)


def test_contrast_named_like_a_regressor_is_counted_once(cohort):
    """Source: common practice - a design may name a contrast after its regressor; each
    subject still contributes one value (scipy.stats.ttest_1samp as the reference)."""
    from scipy import stats

    tables, participants = cohort
    extra = tables[tables["term"] == "subtract"].assign(term_kind="contrast", condition="")
    doubled = pd.concat([tables, extra], ignore_index=True)
    res = GroupModel().fit(doubled, participants)
    row = res.table().set_index(["channel", "term"]).loc[("frontal_a", "subtract")]
    sel = tables[(tables["channel"] == "frontal_a") & (tables["term"] == "subtract")]
    assert row["n_subjects"] == 16
    np.testing.assert_allclose(row["stat"], stats.ttest_1samp(sel["estimate_pct"], 0).statistic)


def test_numeric_group_labels(cohort):
    """Source: common practice - groups coded 1/2 in participants.tsv are named '1' and '2'."""
    tables, participants = cohort
    participants = participants.assign(
        group=participants["group"].map({"older": 1.0, "younger": 2.0})
    )
    res = GroupModel(kind="two-sample", groups=("2", "1")).fit(tables, participants)
    assert set(res.table()["comparison"]) == {"2 - 1"}
