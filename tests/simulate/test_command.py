"""The ``fstats simulate`` command."""

import json

from fstats.cli import main


def test_simulate_command_writes_cohort(tmp_path, capsys):
    """Source: common practice - the command writes the cohort, says where, and exits 0."""
    out = tmp_path / "demo"
    code = main(
        [
            "-q",
            "simulate",
            str(out),
            "--subjects-per-group",
            "1",
            "--duration-s",
            "120",
            "--effect-pct",
            "10",
            "--seed",
            "5",
        ]
    )
    assert code == 0
    assert str(out) in capsys.readouterr().out
    truth = json.loads((out / "ground_truth.json").read_text())
    assert truth["seed"] == 5 and truth["cohort"]["group_mean_effect_pct"]["younger"] == 10.0
    assert (out / "sub-02" / "sub-02_task-subtract_flow.tsv").exists()


def test_simulate_command_refuses_g2_in_tables(tmp_path, capsys):
    """Source: common practice - a bad option combination is a one-line error with exit 2."""
    code = main(["simulate", str(tmp_path / "x"), "--with-g2"])
    assert code == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "--with-g2" in err[0]
    assert not (tmp_path / "x").exists()
