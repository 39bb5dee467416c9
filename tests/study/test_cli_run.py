"""Tests of fstats/cli/_run.py: help text, exit codes for bad input."""

import pytest

from fstats.cli import main


@pytest.mark.parametrize("command", ["run", "regroup"])
def test_help_names_inputs_outputs_and_exit_codes(command, capsys):
    """Source: common practice - every subcommand documents its inputs, outputs and exit codes."""
    with pytest.raises(SystemExit) as info:
        main([command, "--help"])
    assert info.value.code == 0
    text = capsys.readouterr().out
    assert "STUDY.yaml" in text and "done.json" in text and "exit status" in text
    if command == "run":
        for option in ("--workers", "--scheduler", "--no-reports", "--force", "local-cluster"):
            assert option in text


def test_bad_study_file_exits_2_with_one_line(tmp_path, capsys):
    """Source: common practice - bad input gives exit status 2 and a one-line message."""
    study = tmp_path / "study.yaml"
    study.write_text("design: d.yaml\noutput: out\ncohort: c\nwokers: 2\n")
    assert main(["run", str(study)]) == 2
    err = capsys.readouterr().err.strip()
    assert len(err.splitlines()) == 1
    assert "line 4, key 'wokers'" in err and "did you mean 'workers'?" in err
    assert not (tmp_path / "out").exists()  # nothing written for bad input
    assert main(["regroup", str(tmp_path / "missing.yaml")]) == 2


def test_workers_must_be_positive(tmp_path, capsys):
    """Source: common practice - argparse rejects bad option values with exit status 2."""
    with pytest.raises(SystemExit) as info:
        main(["run", str(tmp_path / "s.yaml"), "--workers", "0"])
    assert info.value.code == 2
    assert "expected a number of workers >= 1" in capsys.readouterr().err


def test_progress_is_plain_logging_off_a_terminal_and_bars_on_one(capsys):
    """Source: common practice - progress bars only on a terminal; log lines otherwise."""
    from fstats.cli._run import _Bars, _progress
    from fstats.study import StudyProgress

    with _progress() as bars:  # pytest's stderr is not a terminal
        assert bars is None
    bars = _Bars()
    for done in range(4):
        bars(StudyProgress("subjects", done, 3, f"sub-0{done}: computed"))
    bars(StudyProgress("group", 1, 1, "group model"))
    bars.close()
    err = capsys.readouterr().err
    assert "3/3" in err and "1/1" in err and "sub-03: computed" in err
