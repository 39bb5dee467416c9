"""Design files: schema validation and one-line errors naming file, line and key."""

import textwrap
from pathlib import Path

import numpy as np
import pytest

from fstats.design import build_design, load_design
from fstats.errors import InputError
from fstats.inputs import Channel, Recording

DESIGNS = Path(__file__).resolve().parents[2] / "designs"

VALID = """\
name: test_blocks
timing:
  cycle:
    lead_in_s: 5
    segments:
      - {label: rest, length_s: 20}
      - {label: tap, length_s: 30}
baseline: [rest]
conditions:
  tap:
    response: flow
drift:
  basis: cosine
  cutoff_s: 100
contrasts:
  tap: {weights: {tap: 1}}
fit_options:
  method: ar-irls
  max_ar_order: 8
"""

# (case id, design text, expected line, expected dotted key, text the message must contain)
MALFORMED = [
    (
        "unknown_top_key",
        VALID + "colour: blue\n",
        20,
        "colour",
        "one of the keys",
    ),
    (
        "typo_with_suggestion",
        VALID.replace("  cutoff_s: 100", "  cutof_s: 100"),
        14,
        "drift.cutof_s",
        "did you mean 'cutoff_s'?",
    ),
    (
        "negative_duration",
        VALID.replace("{label: tap, length_s: 30}", "{label: tap, length_s: -30}"),
        7,
        "timing.cycle.segments[1].length_s",
        "greater than 0",
    ),
    (
        "zero_length_block",
        VALID.replace("{label: rest, length_s: 20}", "{label: rest, length_s: 0}"),
        6,
        "timing.cycle.segments[0].length_s",
        "greater than 0",
    ),
    (
        "contrast_on_unknown_condition",
        VALID.replace("tap: {weights: {tap: 1}}", "tap: {weights: {tapp: 1}}"),
        16,
        "contrasts.tap.weights.tapp",
        "did you mean 'tap'?",
    ),
    (
        "overlapping_segments",
        VALID.replace("{label: tap, length_s: 30}", "{label: tap, length_s: 30, at_s: 10}"),
        7,
        "timing.cycle.segments[1].at_s",
        "may not overlap",
    ),
    (
        "wrong_type_number_as_text",
        VALID.replace("lead_in_s: 5", "lead_in_s: five"),
        4,
        "timing.cycle.lead_in_s",
        "valid number",
    ),
    (
        "wrong_type_list_expected",
        VALID.replace("baseline: [rest]", "baseline: {rest: 1}"),
        8,
        "baseline",
        "valid list",
    ),
    (
        "missing_required_key",
        VALID.replace("      - {label: tap, length_s: 30}", "      - {label: tap}"),
        7,
        "timing.cycle.segments[1].length_s",
        "required key 'length_s'",
    ),
    (
        "missing_timing",
        "\n".join(VALID.splitlines()[:1] + VALID.splitlines()[7:]) + "\n",
        1,
        "timing",
        "required key 'timing'",
    ),
    (
        "bad_yaml_syntax",
        VALID.replace("  tap:\n    response: flow", "  tap:\n    response: [flow"),
        12,
        "",
        "started at line 11",
    ),
    (
        "unknown_response_model_with_suggestion",
        VALID.replace("response: flow", "response: glovr"),
        11,
        "conditions.tap.response",
        "did you mean 'glover'?",
    ),
    (
        "segment_label_not_declared",
        VALID.replace("{label: rest, length_s: 20}", "{label: rst, length_s: 20}"),
        6,
        "timing.cycle.segments[0].label",
        "did you mean 'rest'?",
    ),
    (
        "parameter_of_another_model",
        VALID.replace("response: flow", "response: {model: glover, bin_s: 2}"),
        11,
        "conditions.tap.response.bin_s",
        "for response model 'glover'",
    ),
    (
        "fir_without_bins",
        VALID.replace("response: flow", "response: {model: fir, bin_s: 2}"),
        11,
        "conditions.tap.response.n_bins",
        "FIR",
    ),
    (
        "duplicate_key",
        VALID.replace("  basis: cosine\n", "  basis: cosine\n  basis: polynomial\n"),
        14,
        "drift.basis",
        "each key once",
    ),
    (
        "both_cycle_and_events",
        VALID.replace("timing:\n", "timing:\n  events: {source: recording}\n"),
        2,
        "timing",
        "exactly one of 'cycle' or 'events'",
    ),
    (
        "f_test_row_unknown",
        VALID.replace("fit_options:", "  both: {rows: [tap, tpa]}\nfit_options:"),
        17,
        "contrasts.both.rows[1]",
        "did you mean 'tap'?",
    ),
    (
        "fit_method_typo",
        VALID.replace("method: ar-irls", "method: ar-irsl"),
        18,
        "fit_options.method",
        "did you mean 'ar-irls'?",
    ),
    (
        "boolean_for_number",
        VALID.replace("max_ar_order: 8", "max_ar_order: yes"),
        19,
        "fit_options.max_ar_order",
        "whole number",
    ),
    (
        "cardiac_aux_without_signal",
        VALID + "nuisance:\n  cardiac: {source: aux}\n",
        21,
        "nuisance.cardiac.source",
        "'signal'",
    ),
    (
        "too_many_harmonics",
        VALID + "nuisance:\n  cardiac: {source: short, harmonics: 9}\n",
        21,
        "nuisance.cardiac.harmonics",
        "less than or equal to 6",
    ),
    (
        "typo_hides_required_key",
        VALID + "nuisance:\n  aux:\n    - {signl: resp}\n",
        22,
        "nuisance.aux[0].signl",
        "did you mean 'signal'?",
    ),
    (
        "tab_indentation",
        VALID.replace("  tap:\n    response: flow", "  tap:\n\tresponse: flow"),
        11,
        "",
        "spaces, not tabs",
    ),
    (
        "unsafe_yaml_tag",
        VALID.replace("name: test_blocks", "name: !!python/object/apply:os.system [ls]"),
        1,
        "",
        "plain YAML values",
    ),
    (
        "empty_file",
        "",
        1,
        "",
        "empty file",
    ),
    (
        "not_a_mapping",
        "- just\n- a list\n",
        1,
        "",
        "YAML mapping",
    ),
]


def _write(tmp_path, name, text):
    path = tmp_path / f"{name}.yaml"
    path.write_text(text, encoding="utf-8")
    return path


def test_valid_design_loads():
    """Source: common practice - the reference design used by the malformed variants is valid."""
    spec = load_design_text(VALID)
    assert spec.name == "test_blocks"
    assert spec.fit_options == {"method": "ar-irls", "max_ar_order": 8}
    assert spec.where("drift", "cutoff_s") == "line 14, key 'drift.cutoff_s'"


def load_design_text(text, tmp=None):
    import tempfile

    with tempfile.TemporaryDirectory() as d:
        path = Path(d) / "design.yaml"
        path.write_text(text)
        return load_design(path)


@pytest.mark.parametrize(
    ("case", "text", "line", "key", "contains"), MALFORMED, ids=[m[0] for m in MALFORMED]
)
def test_malformed_design_gives_one_line_error(tmp_path, case, text, line, key, contains):
    """Source: common practice (STYLE.md section 3) - a bad design file raises one InputError
    line naming the file, the line and the dotted key, with a "did you mean" for typos."""
    path = _write(tmp_path, case, text)
    with pytest.raises(InputError) as info:
        load_design(path)
    message = str(info.value)
    assert "\n" not in message
    assert message.startswith(str(path))
    assert f"line {line}" in message
    if key:
        assert f"key '{key}'" in message
    assert contains in message


def _recording(duration_s=300.0, fs=10.0):
    times = np.arange(0.0, duration_s, 1 / fs)
    rng = np.random.default_rng(0)
    flow = 1e-8 * (1 + 0.01 * rng.standard_normal((times.size, 2)))
    return Recording(
        times_s=times,
        flow=flow,
        channels=(Channel("scalp", 1.0, True), Channel("deep", 3.0, False)),
        source="rec_flow.tsv",
    )


@pytest.mark.parametrize(
    ("case", "text", "line", "key", "contains", "duration_s"),
    [
        (
            "cutoff_longer_than_recording",
            VALID.replace("cutoff_s: 100", "cutoff_s: 400"),
            14,
            "drift.cutoff_s",
            "no longer than the recording",
            300.0,
        ),
        (
            "fir_more_bins_than_samples",
            VALID.replace("response: flow", "response: {model: fir, bin_s: 0.1, n_bins: 5000}"),
            11,
            "conditions.tap.response.n_bins",
            "FIR bins as samples",
            300.0,
        ),
        (
            "unknown_short_channel",
            VALID + "nuisance:\n  short_channels: {channels: [scalpp]}\n",
            21,
            "nuisance.short_channels.channels[0]",
            "did you mean 'scalp'?",
            300.0,
        ),
        (
            "unknown_aux_signal",
            VALID + "nuisance:\n  aux:\n    - {signal: resp}\n",
            22,
            "nuisance.aux[0].signal",
            "auxiliary signal",
            300.0,
        ),
    ],
    ids=lambda v: v if isinstance(v, str) and " " not in v and "\n" not in v else "",
)
def test_design_that_does_not_fit_the_recording(
    tmp_path, case, text, line, key, contains, duration_s
):
    """Source: common practice - errors found only against a recording still name the
    design file, line and key."""
    path = _write(tmp_path, case, text)
    spec = load_design(path)
    with pytest.raises(InputError) as info:
        build_design(spec, _recording(duration_s))
    message = str(info.value)
    assert "\n" not in message
    assert message.startswith(str(path))
    assert f"line {line}, key '{key}'" in message
    assert contains in message


@pytest.mark.parametrize("name", ["subtract_blocks.yaml", "cue_events.yaml"])
def test_shipped_designs_load(name):
    """Source: common practice - the designs used by the demo are valid."""
    spec = load_design(DESIGNS / name)
    assert spec.fit_options["method"] == "ar-irls"


def test_subtract_design_declares_the_demo_protocol():
    """Source: CONTRACTS section 3 - demo protocol 20 s rest, 40 s subtract, 25 s recover."""
    spec = load_design(DESIGNS / "subtract_blocks.yaml")
    segs = [(s.label, s.length_s) for s in spec.timing.cycle.segments]
    assert segs == [("rest", 20.0), ("subtract", 40.0), ("recover", 25.0)]
    assert set(spec.contrasts) == {"subtract", "recover", "subtract_vs_recover", "any_task"}
    assert spec.contrasts["any_task"].rows == ["subtract", "recover"]


def test_response_shorthand_and_textwrap_example():
    """Source: designs/README.md - 'response: glover' is short for {model: glover}."""
    text = textwrap.dedent(
        """\
        timing: {events: {source: recording, rename: {cue_a: cue, cue_b: cue}}}
        conditions:
          cue: {response: glover, derivatives: [temporal, dispersion], amplitude: modulate}
        """
    )
    spec = load_design_text(text)
    assert spec.conditions["cue"].response.model == "glover"
    assert spec.timing.events.rename == {"cue_a": "cue", "cue_b": "cue"}


def test_readme_example_is_a_valid_design(tmp_path):
    """Source: designs/README.md - the documented complete example loads and builds."""
    readme = (DESIGNS / "README.md").read_text()
    block = readme.split("## Complete example")[1].split("```yaml\n")[1].split("```")[0]
    spec = load_design_text(block)
    assert spec.conditions["recover"].derivatives == ["temporal"]
    times = np.arange(0.0, 600.0, 0.05)
    rng = np.random.default_rng(0)
    beats = np.cumsum(np.full(800, 0.85))
    k = np.clip(np.searchsorted(beats, times) - 1, 0, None)
    pulse = np.exp(-(times - beats[k]) / 0.2)
    from fstats.inputs import AuxSignal

    aux = {
        name: AuxSignal(name, times, rng.standard_normal(times.size))
        for name in ("resp", "accel_x", "accel_y", "accel_z")
    }
    rec = Recording(
        times_s=times,
        flow=1e-8 * (1 + 0.1 * pulse[:, None] + 0.01 * rng.standard_normal((times.size, 2))),
        channels=(Channel("scalp", 1.0, True), Channel("deep", 3.0, False)),
        aux=aux,
    )
    d = build_design(spec, rec)
    assert abs(d.info["cardiac"]["heart_rate_bpm"] - 60 / 0.85) < 2.0
    assert {"task", "constant", "drift", "short", "cardiac", "aux", "motion"} >= set(d.kinds)
