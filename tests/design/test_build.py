"""build_design: timing sources, regressor columns, contrasts, cardiac summary."""

import warnings
from dataclasses import replace
from pathlib import Path

import numpy as np
import pytest
from numpy.testing import assert_allclose, assert_array_equal
from scipy import stats

from fstats.design import build_design, design_events, load_design, parse_design
from fstats.errors import DesignWarning, InputError
from fstats.inputs import AuxSignal, Channel, Recording, TaskTiming, read_events

DESIGNS = Path(__file__).resolve().parents[2] / "designs"

BLOCKS = """\
name: blocks
timing:
  cycle:
    lead_in_s: 10
    segments:
      - {label: rest, length_s: 20}
      - {label: subtract, length_s: 40}
      - {label: recover, length_s: 25}
baseline: [rest]
conditions:
  subtract: {response: flow}
  recover: {response: canonical, derivatives: [temporal]}
drift: {basis: cosine, cutoff_s: 170}
nuisance:
  short_channels: {channels: [scalp], lags_s: [0.5]}
contrasts:
  subtract_vs_recover: {weights: {subtract: 1, recover: -1}}
  both: {rows: [subtract, recover, {recover_dt: 1}]}
fit_options: {method: ols, max_ar_order: 0, extra_setting: kept}
"""

FROM_FILE = BLOCKS.replace(
    """  cycle:
    lead_in_s: 10
    segments:
      - {label: rest, length_s: 20}
      - {label: subtract, length_s: 40}
      - {label: recover, length_s: 25}
""",
    """  events: {source: file, file: events.tsv}
""",
)


def _recording(duration_s=600.0, fs=10.0, seed=0, events=None, aux=None):
    rng = np.random.default_rng(seed)
    times = np.arange(0.0, duration_s, 1 / fs)
    flow = 1e-8 * (1 + 0.05 * rng.standard_normal((times.size, 2)).cumsum(axis=0) / 30)
    return Recording(
        times_s=times,
        flow=flow,
        channels=(Channel("scalp", 1.0, True), Channel("frontal_a", 3.0, False)),
        events=events,
        aux=aux or {},
        source="sub-01_task-subtract_flow.tsv",
    )


def _spec(tmp_path, text, name="design.yaml"):
    path = tmp_path / name
    path.write_text(text)
    return load_design(path)


def _write_events_tsv(path, rows):
    lines = ["onset\tduration\ttrial_type"] + [f"{o:g}\t{d:g}\t{t}" for o, d, t in rows]
    path.write_text("\n".join(lines) + "\n")


def _cycle_rows(duration_s):
    rows, t = [], 10.0
    while t < duration_s:
        for label, length in (("rest", 20.0), ("subtract", 40.0), ("recover", 25.0)):
            if t < duration_s:
                rows.append((t, length, label))
            t += length
    return rows


def test_yaml_cycle_and_events_tsv_give_identical_design(tmp_path):
    """Source: common practice - the same protocol declared as a YAML cycle or as a BIDS
    events.tsv (read by fstats.inputs.read_events) must give the same design matrix."""
    rec = _recording()
    _write_events_tsv(tmp_path / "events.tsv", _cycle_rows(rec.duration_s))
    from_yaml = build_design(_spec(tmp_path, BLOCKS), rec)
    from_file = build_design(_spec(tmp_path, FROM_FILE, "file.yaml"), rec)
    assert from_yaml.names == from_file.names
    assert_array_equal(from_yaml.values, from_file.values)
    # and the same events carried by the recording (sidecar / SNIRF stims)
    events = read_events(tmp_path / "events.tsv")
    recorded = FROM_FILE.replace("{source: file, file: events.tsv}", "{source: recording}")
    from_recording = build_design(
        _spec(tmp_path, recorded, "rec.yaml"), replace(rec, events=events)
    )
    assert_array_equal(from_yaml.values, from_recording.values)
    # and given to build_design directly
    direct = build_design(_spec(tmp_path, BLOCKS), rec, events=events)
    assert_array_equal(from_yaml.values, direct.values)


def test_design_events_lists_condition_blocks_only(tmp_path):
    """Source: closed form - lead-in 10 s, cycle 85 s, 600 s recording: cycles start at
    10, 95, ..., 520 (7 cycles), subtract at +20 s, recover at +60 s; the 7th recover
    (580-605 s) is cut by the end but kept."""
    spec = _spec(tmp_path, BLOCKS)
    ev = design_events(spec, _recording())
    assert ev.condition_names == ("subtract", "recover")
    assert_allclose(ev.select("subtract").onsets_s, 30.0 + 85.0 * np.arange(7))
    assert_allclose(ev.select("recover").onsets_s, 70.0 + 85.0 * np.arange(7))
    assert np.all(np.diff(ev.onsets_s) > 0)


def test_columns_kinds_and_order(tmp_path):
    """Source: CONTRACTS section 4 - short-channel columns have kind 'short'; columns are
    task, constant, drift, short; K = floor(2 N dt / Tc) = floor(1200/170) = 7 cosines."""
    d = build_design(_spec(tmp_path, BLOCKS), _recording())
    assert d.names[:4] == ("subtract", "recover", "recover_dt", "constant")
    assert d.kinds.count("drift") == 7
    assert d.names[-2:] == ("short:scalp", "short:scalp@+0.5s")
    assert d.kinds[-2:] == ("short", "short")
    assert d.conditions == {"subtract": ("subtract",), "recover": ("recover", "recover_dt")}
    assert d.values.shape == (6000, len(d.names))


def test_short_regressor_is_zscored_flow_with_lagged_copy(tmp_path):
    """Source: scipy.stats.zscore - the short column is the z-scored short-channel flow;
    a 0.5 s lag at 10 Hz is a 5-sample shift (zeros shifted in)."""
    rec = _recording()
    d = build_design(_spec(tmp_path, BLOCKS), rec)
    z = stats.zscore(rec.channel_flow("scalp"))
    assert_allclose(d.column("short:scalp"), z, atol=1e-12)
    assert_allclose(d.column("short:scalp@+0.5s")[5:], z[:-5], atol=1e-12)
    assert_allclose(d.column("short:scalp@+0.5s")[:5], 0.0)


def test_derivative_column_is_orthogonal_to_its_main_column(tmp_path):
    """Source: common practice - derivative columns are orthogonalised with respect to
    the main response so the main beta keeps its meaning."""
    d = build_design(_spec(tmp_path, BLOCKS), _recording())
    main, deriv = d.column("recover"), d.column("recover_dt")
    assert abs(main @ deriv) < 1e-9 * np.linalg.norm(main) * np.linalg.norm(deriv)
    assert_allclose(deriv.std(), main.std(), rtol=1e-12)


def test_contrasts_are_expanded_over_columns(tmp_path):
    """Source: common practice - condition weights land on the condition's main column;
    F rows stack t rows, explicit column names address derivative columns."""
    d = build_design(_spec(tmp_path, BLOCKS), _recording())
    con = {c.name: c for c in d.contrasts}
    t = con["subtract_vs_recover"]
    assert t.kind == "t" and t.weights.shape == (1, d.n_regressors)
    expected = np.zeros(d.n_regressors)
    expected[d.names.index("subtract")] = 1
    expected[d.names.index("recover")] = -1
    assert_array_equal(t.weights[0], expected)
    f = con["both"]
    assert f.kind == "F" and f.weights.shape == (3, d.n_regressors)
    assert f.weights[2, d.names.index("recover_dt")] == 1


def test_fit_options_are_passed_through(tmp_path):
    """Source: CONTRACTS section 4 - fit options travel untouched to the fit stage."""
    spec = _spec(tmp_path, BLOCKS)
    d = build_design(spec, _recording())
    assert spec.fit_options == {"method": "ols", "max_ar_order": 0, "extra_setting": "kept"}
    assert d.info["fit_options"] == spec.fit_options
    assert d.info["cardiac"] is None
    assert set(d.info["diagnostics"]) >= {"condition_number", "vif", "warnings"}


def test_recording_is_not_modified(tmp_path):
    """Source: common practice (STYLE.md section 2) - pure functions leave inputs alone."""
    rec = _recording()
    before = rec.flow.copy()
    build_design(_spec(tmp_path, BLOCKS), rec)
    assert_array_equal(rec.flow, before)


EVENTS = """\
timing:
  events:
    source: recording
    rename: {cue_left: cue, cue_right: cue}
    ignore: [button]
conditions:
  cue: {response: flow, amplitude: modulate}
drift: {basis: polynomial, order: 2}
"""


def _cue_events():
    onsets = np.arange(10.0, 280.0, 15.0)
    kinds = tuple("cue_left" if i % 2 else "cue_right" for i in range(onsets.size))
    amps = 1.0 + 0.5 * (np.arange(onsets.size) % 3)
    return TaskTiming(
        onsets_s=np.r_[onsets, onsets + 3.0],
        durations_s=np.r_[np.full(onsets.size, 1.0), np.zeros(onsets.size)],
        conditions=kinds + ("button",) * onsets.size,
        amplitudes=np.r_[amps, np.ones(onsets.size)],
        source="events.tsv",
    )


def test_renamed_trial_types_merge_and_parametric_modulator(tmp_path):
    """Source: common practice (parametric modulation) - merged trial types form one
    condition; the modulator column is the same regressor built with mean-centred amplitudes,
    and main + modulator reproduce the amplitude-scaled regressor by linearity."""
    spec = _spec(tmp_path, EVENTS)
    rec = _recording(300.0, events=_cue_events())
    d = build_design(spec, rec)
    assert d.conditions["cue"] == ("cue", "cue_amp")
    assert d.info["n_events"] == {"cue": 18}
    scaled = build_design(_spec(tmp_path, EVENTS.replace("modulate", "scale"), "s.yaml"), rec)
    amps = _cue_events().amplitudes[:18]
    assert_allclose(
        d.column("cue") * amps.mean() + d.column("cue_amp"), scaled.column("cue"), atol=1e-12
    )
    assert d.names[d.kinds.index("drift")] == "drift_p1"


def test_unknown_trial_type_warns_and_missing_condition_fails(tmp_path):
    """Source: common practice - trial types the design does not mention are reported;
    a declared condition without events is an error naming the design key and line."""
    rec = _recording(300.0, events=_cue_events())
    spec = _spec(tmp_path, EVENTS.replace("    ignore: [button]\n", ""))
    with pytest.warns(DesignWarning, match="button"):
        build_design(spec, rec)
    typo = _spec(tmp_path, EVENTS.replace("cue_right: cue}", "cue_right: cues}"), "t.yaml")
    # 'cues' events exist but are not declared -> warning; 'cue' still present -> builds
    with pytest.warns(DesignWarning, match="cues"):
        build_design(typo, rec)
    missing = _spec(tmp_path, EVENTS.replace("cue_left: cue, cue_right: cue", "a: b"), "m.yaml")
    with pytest.raises(InputError, match=r"m\.yaml, line 7, key 'conditions\.cue'"):
        with pytest.warns(DesignWarning, match="cue_left"):
            build_design(missing, rec)


def test_event_design_needs_events(tmp_path):
    """Source: common practice - an event design on a recording without events fails."""
    with pytest.raises(InputError, match="task events"):
        build_design(_spec(tmp_path, EVENTS), _recording(300.0))


def _ppg_recording(rate_bpm, seed):
    rng = np.random.default_rng(seed)
    rec = _recording(300.0, seed=seed)
    fs_aux = 50.0
    t = np.arange(0.0, 300.0, 1 / fs_aux)
    ibi = 60.0 / rate_bpm * (1 + 0.05 * np.sin(2 * np.pi * 0.25 * np.arange(500) * 0.8))
    beats = np.cumsum(ibi + 0.02 * rng.standard_normal(500))
    k = np.clip(np.searchsorted(beats, t) - 1, 0, None)
    since = np.where(t >= beats[0], t - beats[k], 5.0)
    wave = (1 - np.exp(-since / 0.04)) * np.exp(-since / 0.3) + 0.2 * np.exp(
        -(((since - 0.4) / 0.06) ** 2)
    )
    wave += 0.05 * rng.standard_normal(t.size)
    inside = beats[(beats > 0) & (beats < 300)]
    return replace(rec, aux={"ppg": AuxSignal("ppg", t, wave)}), 60 / np.median(np.diff(inside))


def test_cardiac_terms_from_ppg_aux(tmp_path):
    """Source: common practice - a PPG-like aux signal (50 Hz, own time base) gives the
    true median heart rate within 2 bpm; the RETROICOR columns are on the flow time base."""
    rec, true_rate = _ppg_recording(81.0, 3)
    text = EVENTS.replace("source: recording", "source: recording") + (
        "nuisance:\n  cardiac: {source: aux, signal: ppg, harmonics: 3}\n"
    )
    d = build_design(_spec(tmp_path, text), replace(rec, events=_cue_events()))
    card = d.info["cardiac"]
    assert abs(card["heart_rate_bpm"] - true_rate) < 2.0
    assert card["source_channel"] == "aux:ppg"
    assert card["beat_quality"] > 0.9
    assert d.kinds.count("cardiac") == 6
    assert set(card) >= {"heart_rate_bpm", "n_beats", "beat_quality", "source_channel"}
    import json

    json.dumps(card)  # plain numbers and text, safe for result sidecars
    assert d.info["heartbeats_s"].size == card["n_beats"]


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_cardiac_rate_on_simulated_demo_recordings(seed):
    """Source: fstats.simulate ground truth (truth['heart_rate_bpm']) - the demo design's
    cardiac detection from the scalp channel recovers the simulated rate within 2 bpm."""
    simulate = pytest.importorskip("fstats.simulate")
    sim = simulate.simulate_recording(
        simulate.SimulationSettings(duration_s=300.0), np.random.default_rng(seed)
    )
    spec = load_design(DESIGNS / "subtract_blocks.yaml")
    with warnings.catch_warnings():
        warnings.simplefilter("error", DesignWarning)
        d = build_design(spec, sim.recording)
    assert abs(d.info["cardiac"]["heart_rate_bpm"] - sim.truth["heart_rate_bpm"]) < 2.0


def test_cue_design_on_simulated_event_recording():
    """Source: fstats.simulate ground truth - the event scenario's cue onsets are the
    design's events; heart rate within 2 bpm from the short channel."""
    simulate = pytest.importorskip("fstats.simulate")
    sim = simulate.simulate_recording(
        simulate.SimulationSettings(design="event", duration_s=300.0), np.random.default_rng(4)
    )
    spec = load_design(DESIGNS / "cue_events.yaml")
    d = build_design(spec, sim.recording)
    assert_allclose(d.info["events"].onsets_s, sim.recording.events.select("cue").onsets_s)
    assert abs(d.info["cardiac"]["heart_rate_bpm"] - sim.truth["heart_rate_bpm"]) < 2.0
    assert d.names[:2] == ("cue", "cue_dt")


def test_parse_design_without_file_names_a_placeholder():
    """Source: common practice - designs built from text report '<design>' as their file."""
    spec = parse_design("timing: {events: {}}\nconditions: {cue: {}}\n")
    assert spec.source == "<design>"
    with pytest.raises(InputError, match="<design>, line 2, key 'conditions.cue'"):
        with pytest.warns(DesignWarning, match="button"):
            build_design(spec, _recording(300.0, events=_cue_events()))


def test_cardiac_harmonics_above_nyquist_warn(tmp_path):
    """Source: REFERENCE-CHECKS 6.2/7.1 - harmonic m of an 81 bpm heart (1.35 Hz) aliases when
    m x 1.35 Hz reaches half the flow's 5 Hz sampling rate (M=2: 2.7 Hz > 2.5 Hz)."""
    rec, _ = _ppg_recording(81.0, 3)
    slow = replace(
        rec,
        times_s=rec.times_s[::2],
        flow=rec.flow[::2],
        events=_cue_events(),
    )
    text = EVENTS + "nuisance:\n  cardiac: {source: aux, signal: ppg, harmonics: 2}\n"
    with pytest.warns(DesignWarning, match="aliases"):
        build_design(_spec(tmp_path, text), slow)
    with warnings.catch_warnings():
        warnings.simplefilter("error", DesignWarning)
        build_design(_spec(tmp_path, text.replace("harmonics: 2", "harmonics: 1"), "m1.yaml"), slow)


def test_events_file_with_recording_placeholders(tmp_path):
    """Source: common practice - one design for a study reads each recording's own events
    file through the {dir} and {stem} placeholders."""
    rec = replace(_recording(), source=str(tmp_path / "sub-01_task-subtract_flow.tsv"))
    folder = tmp_path / "timing"
    folder.mkdir()
    _write_events_tsv(folder / "sub-01_task-subtract_blocks.tsv", _cycle_rows(rec.duration_s))
    text = FROM_FILE.replace("file: events.tsv", "file: '{dir}/timing/{stem}_blocks.tsv'")
    from_file = build_design(_spec(tmp_path, text, "p.yaml"), rec)
    assert_array_equal(from_file.values, build_design(_spec(tmp_path, BLOCKS), rec).values)
    bad = _spec(tmp_path, text.replace("{stem}", "{subject}"), "bad.yaml")
    with pytest.raises(InputError, match=r"bad\.yaml, line 3, key 'timing\.events\.file'"):
        build_design(bad, rec)


def test_cycle_repeats_beyond_the_recording_warn(tmp_path):
    """Source: common practice - declared repeats that do not fit are reported and dropped."""
    text = BLOCKS.replace("    lead_in_s: 10\n", "    lead_in_s: 10\n    repeats: 9\n")
    with pytest.warns(DesignWarning, match="start after the recording ends"):
        ev = design_events(_spec(tmp_path, text), _recording())
    assert len(ev.select("subtract")) == 7


def test_cardiac_rate_on_the_demo_cohort(tmp_path):
    """Source: the simulated demo cohort's ground_truth.json (CONTRACTS section 6) - for every
    subject of both groups, the heart rate detected from the scalp channel by the demo design
    is within 2 bpm of the simulated 'heart_rate_bpm'."""
    import json

    simulate = pytest.importorskip("fstats.simulate")
    from fstats.inputs import read_cohort, read_recording
    from fstats.simulate.cohort import simulate_cohort

    root = simulate_cohort(
        tmp_path / "cohort",
        n_per_group=3,
        settings=simulate.SimulationSettings(duration_s=300.0),
        seed=21,
    )
    truth = json.loads((root / "ground_truth.json").read_text())["subjects"]
    spec = load_design(DESIGNS / "subtract_blocks.yaml")
    cohort = read_cohort(root)
    assert len(cohort.recordings) == 6
    for entry in cohort.recordings:
        d = build_design(spec, read_recording(entry.path))
        expected = truth[entry.participant_id]["heart_rate_bpm"]
        assert abs(d.info["cardiac"]["heart_rate_bpm"] - expected) < 2.0, entry.participant_id


def test_doubtful_heartbeat_detection_warns(tmp_path):
    """Source: common practice - a scalp channel without a pulse (random-walk noise) gives
    irregular detections; the beat quality (< 0.8) is reported with a DesignWarning."""
    text = BLOCKS + "nuisance:\n  cardiac: {source: short}\n"
    text = text.replace("nuisance:\n  short_channels: {channels: [scalp], lags_s: [0.5]}\n", "")
    with pytest.warns(DesignWarning, match="doubtful"):
        d = build_design(_spec(tmp_path, text), _recording())
    assert d.info["cardiac"]["beat_quality"] < 0.8
