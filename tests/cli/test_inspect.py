"""``fstats inspect``: summary of a recording or cohort, exit codes, help."""

import numpy as np
import pytest

from fstats.cli import main
from fstats.inputs import AuxSignal, Channel, Recording, TaskTiming, write_flow_table, write_snirf


def _recording(seed=0, subject="sub-01"):
    rng = np.random.default_rng(seed)
    times = np.arange(1500) / 25.0  # 60 s at 25 Hz
    flow = 1e-8 * np.exp(0.05 * rng.standard_normal((1500, 3)))
    channels = (
        Channel("scalp", 1.2, False, 785.0),  # no explicit short role in the sidecar below
        Channel("frontal_a", 3.0, False, 785.0),
        Channel("frontal_b", 3.5, False, 785.0),
    )
    events = TaskTiming(
        np.array([5.0, 25.0, 45.0, 15.0]),
        np.array([10.0, 10.0, 10.0, 5.0]),
        ("subtract", "subtract", "subtract", "recover"),
        np.ones(4),
    )
    aux = {"ppg": AuxSignal("ppg", np.arange(600) / 10.0, rng.standard_normal(600))}
    return Recording(times, flow, channels, events=events, aux=aux, subject=subject)


def _flow_table(tmp_path, name="sub-01_task-subtract_flow.tsv"):
    path = write_flow_table(_recording(), tmp_path / name)
    channels = path.with_name(name.replace("_flow.tsv", "_channels.tsv"))
    lines = channels.read_text().splitlines()
    channels.write_text(
        "\n".join(["name\tseparation_cm"] + ["\t".join(line.split("\t")[:2]) for line in lines[1:]])
        + "\n"
    )
    return path


def test_help_explains_inputs_units_and_exit_status(capsys):
    """Source: common practice - `--help` documents inputs, units and exit codes."""
    with pytest.raises(SystemExit) as exc:
        main(["inspect", "--help"])
    assert exc.value.code == 0
    text = capsys.readouterr().out
    for word in (
        "channels.tsv",
        "events",
        "snirf",
        "separation_cm",
        "cm²/s",
        "--short-threshold-cm",
        "exit status",
        "participants.tsv",
        "Hz",
    ):
        assert word in text


def test_summary_of_a_flow_table(tmp_path, capsys):
    """Source: common practice - 1500 samples at 25 Hz last 60 s; 1.2 cm <= 1.5 cm is short."""
    path = _flow_table(tmp_path)
    assert main(["inspect", str(path)]) == 0
    out = capsys.readouterr().out
    assert "60.0 s, 1500 samples at 25 Hz" in out
    assert "participant sub-01" in out
    scalp = next(line for line in out.splitlines() if "scalp" in line)
    assert "1.20 cm" in scalp and "short" in scalp
    assert "subtract: 3" in out and "recover: 1" in out
    assert "ppg (600 samples, 10 Hz)" in out
    assert "repairs: none" in out


def test_threshold_option_changes_roles(tmp_path, capsys):
    """Source: CONTRACTS section 1 - the short-separation threshold is user-overridable."""
    path = _flow_table(tmp_path)
    assert main(["inspect", str(path), "--short-threshold-cm", "1.0"]) == 0
    scalp = next(line for line in capsys.readouterr().out.splitlines() if "scalp" in line)
    assert "long" in scalp
    with pytest.raises(SystemExit) as exc:
        main(["inspect", str(path), "--short-threshold-cm", "-1"])
    assert exc.value.code == 2


def test_repairs_are_listed(tmp_path, capsys):
    """Source: common practice - a repaired input says what was repaired."""
    path = _flow_table(tmp_path)
    lines = path.read_text().splitlines()
    lines.insert(20, lines[19])
    path.write_text("\n".join(lines) + "\n")
    assert main(["inspect", str(path)]) == 0
    out = capsys.readouterr().out
    assert "repairs: 1" in out and "dropped 1 repeated row" in out


def test_cohort_summary_and_a_refused_recording(tmp_path, capsys):
    """Source: common practice - one bad file is reported, the others are still summarised."""
    write_flow_table(_recording(1, "sub-01"), tmp_path / "sub-01" / "sub-01_task-subtract_flow.tsv")
    write_snirf(_recording(2, "sub-02"), tmp_path / "sub-02" / "sub-02_task-subtract_dcs.snirf")
    (tmp_path / "participants.tsv").write_text(
        "participant_id\tgroup\tage\nsub-01\tyounger\t25\nsub-02\tolder\t70\n"
    )
    assert main(["inspect", str(tmp_path)]) == 0
    out = capsys.readouterr().out
    assert "2 participant(s), 2 recording(s)" in out
    assert "groups: younger 1, older 1" in out
    assert "covariates: age" in out
    assert out.count("60.0 s, 1500 samples") == 2
    bad = tmp_path / "sub-01" / "sub-01_task-subtract_flow.tsv"
    bad.write_text(bad.read_text().replace("time", "tiem", 1))
    assert main(["inspect", str(tmp_path)]) == 2
    captured = capsys.readouterr()
    (line,) = captured.err.strip().splitlines()
    assert line.startswith(f"fstats inspect: error: {bad}, line 1 (header)")
    assert "1 of 2 recording(s) refused" in captured.out
    assert "sub-02_task-subtract_dcs.snirf" in captured.out


def test_summary_of_a_snirf_file_with_g2(tmp_path, capsys):
    """Source: SNIRF specification - g2 lags come from probe/correlationTimeDelays."""
    base = _recording(3)
    lags = np.geomspace(1e-7, 1e-2, 12)
    recording = Recording(
        base.times_s,
        base.flow,
        base.channels,
        events=base.events,
        g2=1.0 + 0.5 * np.exp(-lags / 1e-5) * np.ones((1500, 3, 1)),
        lags_s=lags,
        count_rate_hz=np.full((1500, 3), 5e4),
        subject="sub-04",
    )
    path = write_snirf(recording, tmp_path / "sub-04_task-subtract_run-3_dcs.snirf")
    assert main(["inspect", str(path), "--short-threshold-cm", "1.3"]) == 0
    out = capsys.readouterr().out
    assert "participant sub-04, session run-3" in out
    assert "g2: 12 lags, 1e-07..0.01 s" in out
    assert "count rate (median, Hz): scalp 5e+04" in out
    assert "aux: none" in out
