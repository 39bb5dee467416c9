"""Tests of the ``fstats fit`` command (fstats/cli/_fit.py)."""

import json
import warnings
from pathlib import Path

import numpy as np
import pytest

from fstats.cli import main
from fstats.fit import RESULT_COLUMNS, read_subject_results
from fstats.inputs import write_flow_table
from fstats.simulate import SimulationSettings, simulate_recording

DESIGN = Path(__file__).resolve().parents[2] / "designs" / "subtract_blocks.yaml"


@pytest.fixture(scope="module")
def flow_file(tmp_path_factory):
    sim = simulate_recording(
        SimulationSettings(duration_s=300.0, with_aux=False),
        np.random.default_rng(11),
        subject="sub-01",
    )
    path = tmp_path_factory.mktemp("rec") / "sub-01_task-subtract_flow.tsv"
    write_flow_table(sim.recording, path)
    return path


def test_fit_command_writes_results(flow_file, tmp_path):
    """Source: common practice - the command writes the tidy table, sidecar and time courses."""
    out = tmp_path / "out"
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        code = main(
            [
                "-q",
                "fit",
                str(flow_file),
                "--design",
                str(DESIGN),
                "--out",
                str(out),
                "--method",
                "ar",
                "--max-ar-order",
                "30",
            ]
        )
    assert code == 0
    table = read_subject_results(out / "sub-01_task-subtract_glm.tsv")
    assert list(table.columns) == list(RESULT_COLUMNS)
    assert set(table.channel) == {"scalp", "frontal_a", "frontal_b"}
    assert (table.method == "ar").all() and (table.ar_order <= 30).all()
    meta = json.loads((out / "sub-01_task-subtract_glm.json").read_text())
    assert meta["options"]["max_ar_order"] == 30
    assert str(flow_file) in meta["inputs"] and meta["inputs"][str(flow_file)]
    assert (out / "sub-01_task-subtract_timecourses.tsv").is_file()


def test_fit_command_bad_input_exit_2(tmp_path, capsys):
    """Source: common practice - a missing recording is a one-line error with exit code 2."""
    code = main(
        ["fit", str(tmp_path / "nope_flow.tsv"), "--design", str(DESIGN), "--out", str(tmp_path)]
    )
    assert code == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "nope_flow.tsv" in err[0]
    assert not list(tmp_path.iterdir())


def test_fit_help_lists_outputs(capsys):
    """Source: common practice - --help names inputs, outputs and units."""
    with pytest.raises(SystemExit):
        main(["fit", "--help"])
    text = capsys.readouterr().out
    assert "_glm.tsv" in text and "cm²/s" in text and "--max-ar-order" in text
