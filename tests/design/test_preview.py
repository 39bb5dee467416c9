"""``fstats preview``: design checked against a recording, summary, exit codes."""

import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

from fstats.cli import main

DESIGNS = Path(__file__).resolve().parents[2] / "designs"


@pytest.fixture(scope="module")
def recording_path(tmp_path_factory):
    simulate = pytest.importorskip("fstats.simulate")
    from fstats.inputs import write_flow_table

    sim = simulate.simulate_recording(
        simulate.SimulationSettings(duration_s=300.0), np.random.default_rng(9)
    )
    path = tmp_path_factory.mktemp("rec") / "sub-01_task-subtract_flow.tsv"
    write_flow_table(sim.recording, path)
    return path, sim.truth


def test_preview_prints_summary(recording_path, capsys, tmp_path):
    """Source: fstats.simulate ground truth - the summary lists conditions with their event
    counts (300 s of 85 s cycles: 4 subtract and 3 recover blocks... counted from the
    simulator's events), column kinds, condition number and the detected heart rate."""
    path, truth = recording_path
    table = tmp_path / "design.tsv"
    code = main(
        ["preview", str(DESIGNS / "subtract_blocks.yaml"), str(path), "--table", str(table)]
    )
    out = capsys.readouterr().out
    assert code == 0
    assert "subtract" in out and "recover" in out
    assert "condition number" in out
    rate = float(out.split("heart rate")[1].split("bpm")[0])
    assert abs(rate - truth["heart_rate_bpm"]) < 2.0
    assert "short 1" in out and "cardiac 4" in out
    header = table.read_text().splitlines()[0].split("\t")
    assert header[:3] == ["time_s", "subtract", "recover"]


MALFORMED_CLI = [
    ("cutof_s: 170", "key 'drift.cutof_s'"),
    ("length_s: -40", "key 'timing.cycle.segments[1].length_s'"),
    ("channels: [scalpp]", "key 'nuisance.short_channels.channels[0]'"),
    ("cutoff_s: 5000", "key 'drift.cutoff_s'"),
]


@pytest.mark.parametrize(("replacement", "where"), MALFORMED_CLI)
def test_preview_bad_design_exits_2_with_one_line(
    recording_path, tmp_path, capsys, replacement, where
):
    """Source: common practice (STYLE.md section 3) - a bad design gives exit code 2 and a
    single stderr line naming file, line and key, without a traceback."""
    text = (DESIGNS / "subtract_blocks.yaml").read_text()
    original = {
        "cutof_s: 170": "cutoff_s: 170",
        "length_s: -40": "length_s: 40",
        "channels: [scalpp]": "channels: [scalp]",
        "cutoff_s: 5000": "cutoff_s: 170",
    }[replacement]
    bad = tmp_path / "bad.yaml"
    bad_text = text.replace(original, replacement)
    bad.write_text(bad_text)
    line = 1 + next(i for i, ln in enumerate(bad_text.splitlines()) if replacement in ln)
    where = f"line {line}, {where}"
    code = main(["preview", str(bad), str(recording_path[0])])
    err = capsys.readouterr().err
    assert code == 2
    assert err.count("\n") == 1
    assert str(bad) in err and where in err
    assert "Traceback" not in err


def test_preview_subprocess_has_no_traceback(recording_path, tmp_path):
    """Source: common practice - the installed entry point turns InputError into exit 2."""
    bad = tmp_path / "typo.yaml"
    bad.write_text((DESIGNS / "cue_events.yaml").read_text().replace("harmonics", "harmonic"))
    proc = subprocess.run(
        [sys.executable, "-m", "fstats", "preview", str(bad), str(recording_path[0])],
        capture_output=True,
        text=True,
        timeout=120,
    )
    assert proc.returncode == 2
    assert "Traceback" not in proc.stderr
    assert "did you mean 'harmonics'?" in proc.stderr


def _malformed_cases():
    """The malformed design files of test_loader.py (loaded by path: tests are not a package)."""
    import importlib.util

    spec = importlib.util.spec_from_file_location(
        "_design_loader_cases", Path(__file__).with_name("test_loader.py")
    )
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    return module.MALFORMED


@pytest.mark.parametrize("case", _malformed_cases(), ids=lambda c: c[0])
def test_every_malformed_design_through_the_cli(recording_path, tmp_path, capsys, case):
    """Source: common practice (STYLE.md section 3) - each malformed design file gives exit
    code 2 and one stderr line naming the file, line and key, without a traceback."""
    name, text, line, key, contains = case
    bad = tmp_path / f"{name}.yaml"
    bad.write_text(text)
    code = main(["preview", str(bad), str(recording_path[0])])
    err = capsys.readouterr().err
    assert code == 2
    assert err.count("\n") == 1 and "Traceback" not in err
    assert f"{bad}, line {line}" in err
    if key:
        assert f"key '{key}'" in err
    assert contains in err
