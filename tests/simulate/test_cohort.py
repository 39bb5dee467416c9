"""Simulated cohorts on disk: layout, ground truth, read-back through fstats.inputs."""

import json

import numpy as np
import pytest

from fstats.errors import InputError
from fstats.inputs import read_cohort, read_flow_table, read_recording, write_flow_table
from fstats.simulate import SimulationSettings, simulate_cohort, simulate_recording

SHORT = SimulationSettings(duration_s=200.0)


def test_cohort_layout_and_ground_truth(tmp_path):
    """Source: CONTRACTS §1 and §6 - participants.tsv, one folder per subject with flow,
    channels, events and aux sidecars, and ground_truth.json with the per-subject keys."""
    out = simulate_cohort(tmp_path / "cohort", n_per_group=2, settings=SHORT, seed=3)
    cohort = read_cohort(out)
    assert list(cohort.participants["participant_id"]) == ["sub-01", "sub-02", "sub-03", "sub-04"]
    assert list(cohort.participants["group"]) == ["younger", "younger", "older", "older"]
    assert cohort.participants["age"].between(20, 78).all()
    assert len(cohort.recordings) == 4
    for suffix in ("flow", "channels", "events", "aux"):
        assert (out / "sub-01" / f"sub-01_task-subtract_{suffix}.tsv").exists()
    truth = json.loads((out / "ground_truth.json").read_text())
    assert truth["seed"] == 3 and truth["settings"]["duration_s"] == 200.0
    subject = truth["subjects"]["sub-01"]
    for key in (
        "group",
        "effect_pct",
        "scalp_task_pct",
        "heart_rate_bpm",
        "resp_rate_hz",
        "brain_fraction_long",
    ):
        assert key in subject
    assert set(subject["effect_pct"]) == {"frontal_a", "frontal_b"}
    assert subject["effect_pct"]["frontal_b"] == 0.0
    rec = read_recording(out / subject["recording"])
    assert rec.channel_names == ("scalp", "frontal_a", "frontal_b")
    assert rec.short_channels == ("scalp",)
    assert len(rec.events) == len(subject["block_gains"])


def test_same_seed_writes_identical_files(tmp_path):
    """Source: common practice - a seeded simulation is reproducible file for file."""
    a = simulate_cohort(tmp_path / "a", n_per_group=1, settings=SHORT, seed=9)
    b = simulate_cohort(tmp_path / "b", n_per_group=1, settings=SHORT, seed=9)
    c = simulate_cohort(tmp_path / "c", n_per_group=1, settings=SHORT, seed=10)
    flow = "sub-01/sub-01_task-subtract_flow.tsv"
    assert (a / flow).read_bytes() == (b / flow).read_bytes()
    assert (a / "ground_truth.json").read_text() == (b / "ground_truth.json").read_text()
    assert (a / flow).read_bytes() != (c / flow).read_bytes()


def test_group_effects_and_scalp_fraction(tmp_path):
    """Source: closed form - with no between-subject spread the true effects are the group means
    (effect_pct and effect_pct + group_effect_pct), and exactly round(fraction × n) subjects
    carry the task-locked scalp change."""
    settings = SimulationSettings(duration_s=120.0, effect_pct=12.0, scalp_task_fraction=0.5)
    out = simulate_cohort(
        tmp_path / "g", n_per_group=3, settings=settings, group_effect_pct=-4.0, effect_sd_pct=0.0
    )
    subjects = json.loads((out / "ground_truth.json").read_text())["subjects"]
    for truth in subjects.values():
        expected = 12.0 if truth["group"] == "younger" else 8.0
        assert truth["effect_pct"]["frontal_a"] == pytest.approx(expected)
    assert sum(t["scalp_task_pct"] > 0 for t in subjects.values()) == 3


def test_event_timing_round_trip(tmp_path):
    """Source: BIDS events.tsv (onset, duration, trial_type in s) - the events written with a
    simulated recording read back identical, for the block and the event design."""
    for design in ("block", "event"):
        sim = simulate_recording(
            SimulationSettings(design=design, duration_s=300.0), np.random.default_rng(4)
        )
        path = write_flow_table(sim.recording, tmp_path / f"sub-01_task-{design}_flow.tsv")
        back = read_flow_table(path)
        np.testing.assert_array_equal(back.events.onsets_s, sim.recording.events.onsets_s)
        np.testing.assert_array_equal(back.events.durations_s, sim.recording.events.durations_s)
        assert back.events.conditions == sim.recording.events.conditions
        np.testing.assert_array_equal(back.flow, sim.recording.flow)


def test_event_cohort_uses_cue_task_label(tmp_path):
    """Source: CONTRACTS §3 - the event variant is written as task-cue with condition 'cue'."""
    settings = SimulationSettings(design="event", duration_s=150.0)
    out = simulate_cohort(tmp_path / "cue", n_per_group=1, settings=settings)
    rec = read_recording(out / "sub-02" / "sub-02_task-cue_flow.tsv")
    assert set(rec.events.conditions) == {"cue"}
    assert np.all(np.diff(rec.events.onsets_s) >= 12.0)


def test_snirf_cohort_with_g2(tmp_path):
    """Source: CONTRACTS §1 - SNIRF container with BFi (410) and g2 (401) readable back."""
    settings = SimulationSettings(
        duration_s=60.0, rest_s=5.0, subtract_s=20.0, recover_s=10.0, with_g2=True, n_lags=40
    )
    out = simulate_cohort(tmp_path / "s", n_per_group=1, settings=settings, fmt="snirf")
    rec = read_recording(out / "sub-01" / "sub-01_task-subtract_dcs.snirf")
    assert rec.g2 is not None and rec.g2.shape == (1200, 3, 40)
    assert rec.lags_s.size == 40


def test_refusals(tmp_path):
    """Source: common practice - bad targets and options are refused, nothing half-written."""
    other = tmp_path / "other"
    other.mkdir()
    (other / "notes.txt").write_text("keep me")
    with pytest.raises(InputError, match="output folder"):
        simulate_cohort(other, n_per_group=1, settings=SHORT)
    assert sorted(p.name for p in other.iterdir()) == ["notes.txt"]
    with pytest.raises(InputError, match="snirf"):
        simulate_cohort(tmp_path / "x", settings=SimulationSettings(with_g2=True), fmt="tsv")
    with pytest.raises(InputError, match="fmt"):
        simulate_cohort(tmp_path / "x", fmt="csv")
    assert not (tmp_path / "x").exists()
    # an earlier simulated cohort is replaced
    first = simulate_cohort(tmp_path / "again", n_per_group=1, settings=SHORT, seed=1)
    simulate_cohort(first, n_per_group=2, settings=SHORT, seed=2)
    assert json.loads((first / "ground_truth.json").read_text())["seed"] == 2
    assert len(list(tmp_path.glob(".again*"))) == 0
