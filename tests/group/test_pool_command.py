"""The `fstats pool` command (fstats/cli/_pool.py)."""

import json

import pandas as pd
from numpy.testing import assert_allclose
from scipy import stats

from fstats.cli import main


def _write_cohort(tables, participants, root):
    for pid, rows in tables.groupby("subject"):
        folder = root / "subjects" / f"{pid}_task-subtract"
        folder.mkdir(parents=True)
        rows.to_csv(
            folder / f"{pid}_task-subtract_results.tsv", sep="\t", index=False, na_rep="n/a"
        )
    participants.to_csv(root / "participants.tsv", sep="\t", index=False, na_rep="n/a")


def test_pool_two_sample_from_folder(cohort, tmp_path, capsys):
    """Source: scipy.stats.ttest_ind (Welch) on the subject estimates read back from files."""
    tables, participants = cohort
    _write_cohort(tables, participants, tmp_path)
    code = main(
        [
            "pool",
            str(tmp_path / "subjects"),
            "--participants",
            str(tmp_path / "participants.tsv"),
            "--out",
            str(tmp_path / "group"),
            "--model",
            "two-sample",
            "--correction",
            "holm",
        ]
    )
    assert code == 0
    table = pd.read_csv(tmp_path / "group" / "group_table.tsv", sep="\t")
    row = table[(table["channel"] == "frontal_a") & (table["term"] == "subtract")].iloc[0]
    sel = tables[(tables["channel"] == "frontal_a") & (tables["term"] == "subtract")]
    group = sel["subject"].map(participants.set_index("participant_id")["group"])
    ref = stats.ttest_ind(
        sel["estimate_pct"][group == "older"],
        sel["estimate_pct"][group == "younger"],
        equal_var=False,
    )
    assert_allclose(row["p"], ref.pvalue, rtol=1e-8)
    meta = json.loads((tmp_path / "group" / "group_table.json").read_text())
    assert meta["model"]["correction"] == "holm"
    assert len(meta["inputs"]) == 17  # 16 result tables + participants.tsv
    assert "older - younger" in capsys.readouterr().out


def test_pool_bad_input_exits_2_with_one_line(cohort, tmp_path, capsys):
    """Source: common practice - bad input: exit 2 and a one-line message, no outputs."""
    tables, participants = cohort
    _write_cohort(tables, participants, tmp_path)
    code = main(
        [
            "pool",
            str(tmp_path / "subjects"),
            "--participants",
            str(tmp_path / "participants.tsv"),
            "--out",
            str(tmp_path / "group"),
            "--model",
            "mixed",
            "--formula",
            "effect ~ grup",
        ]
    )
    err = capsys.readouterr().err.strip().splitlines()
    assert code == 2
    assert len(err) == 1 and "did you mean 'group'" in err[0]
    assert not (tmp_path / "group").exists()


def test_pool_empty_folder(tmp_path, capsys):
    """Source: common practice - a folder without results is refused, naming the pattern."""
    code = main(["pool", str(tmp_path), "--out", str(tmp_path / "out")])
    assert code == 2
    assert "subject results tables" in capsys.readouterr().err
