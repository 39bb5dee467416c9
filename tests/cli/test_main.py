"""The command line shell: help on every subcommand, exit codes, no tracebacks."""

import subprocess
import sys

import pytest

from fstats.cli import build_parser, main


def _subcommands():
    parser = build_parser()
    for action in parser._actions:
        if action.dest == "command":
            return sorted(action.choices)
    return []


def test_top_level_help_lists_commands(capsys):
    """Source: common practice - `--help` exits 0 and names the subcommands."""
    with pytest.raises(SystemExit) as exc:
        main(["--help"])
    assert exc.value.code == 0
    out = capsys.readouterr().out
    for name in _subcommands():
        assert name in out


@pytest.mark.parametrize("name", _subcommands())
def test_every_subcommand_has_help(name, capsys):
    """Source: common practice - every command explains its inputs and outputs."""
    with pytest.raises(SystemExit) as exc:
        main([name, "--help"])
    assert exc.value.code == 0
    text = capsys.readouterr().out
    assert len(text.split()) > 30, f"`fstats {name} --help` is too thin to explain inputs/outputs"


def test_no_command_prints_help_and_exits_2(capsys):
    """Source: common practice - a usage error exits 2."""
    assert main([]) == 2


def test_module_entry_point_runs():
    """Source: common practice - `python -m fstats --version` works without a console script."""
    done = subprocess.run(
        [sys.executable, "-m", "fstats", "--version"], capture_output=True, text=True, check=False
    )
    assert done.returncode == 0
    assert "fstats" in done.stdout
