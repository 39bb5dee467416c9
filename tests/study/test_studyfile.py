"""Tests of fstats/study/studyfile.py: the study file schema and its error messages."""

import textwrap
from pathlib import Path

import pytest

from fstats.errors import InputError
from fstats.study.studyfile import load_study, recording_stem

DESIGN = Path(__file__).resolve().parents[2] / "designs" / "subtract_blocks.yaml"


def _tree(tmp_path):
    """A design file and two recordings laid out as a study folder would be."""
    (tmp_path / "designs").mkdir()
    (tmp_path / "designs" / "blocks.yaml").write_text(DESIGN.read_text())
    data = tmp_path / "data"
    data.mkdir()
    for pid in ("sub-02", "sub-01"):
        (data / f"{pid}_task-subtract_run-1_flow.tsv").write_text("time\tscalp\n0\t1\n")
    return tmp_path


def _study(tmp_path, text):
    path = tmp_path / "study.yaml"
    path.write_text(textwrap.dedent(text))
    return path


VALID = """\
    title: Test study
    recordings:
      - path: data/sub-02_task-subtract_run-1_flow.tsv
      - path: data/sub-01_task-subtract_run-1_flow.tsv
        participant_id: sub-01
    design: designs/blocks.yaml
    channels:
      short: scalp
      long: [frontal_a]
    fit: {method: ols}
    group: {kind: two-sample, weighting: unweighted}
    corrections: {method: holm, alpha: 0.01}
    output: results
    reports: false
    workers: 2
"""


def test_valid_study_resolves_paths_against_the_study_file(tmp_path):
    """Source: common practice - relative paths in a config file are relative to that file."""
    spec = load_study(_study(_tree(tmp_path), VALID))
    assert spec.title == "Test study"
    assert [r.stem for r in spec.recordings] == [
        "sub-01_task-subtract_run-1",
        "sub-02_task-subtract_run-1",
    ]
    assert [r.participant_id for r in spec.recordings] == ["sub-01", "sub-02"]
    assert [r.session for r in spec.recordings] == ["1", "1"]
    assert spec.design_path == (tmp_path / "designs" / "blocks.yaml").resolve()
    assert spec.output_dir == (tmp_path / "results").resolve()
    assert spec.short_channels == ("scalp",) and spec.long_channels == ("frontal_a",)
    assert spec.fit_options == {"method": "ols"}
    assert spec.group_options["kind"] == "two-sample"
    assert spec.group_options["correction"] == "holm" and spec.group_options["alpha"] == 0.01
    assert spec.reports is False and spec.workers == 2


def test_unknown_key_names_line_dotted_key_and_suggestion(tmp_path):
    """Source: common practice - errors name the file, the key, its line and a near spelling."""
    text = VALID.replace("      long: [frontal_a]", "      lnog: [frontal_a]")
    path = _study(_tree(tmp_path), text)
    with pytest.raises(InputError) as info:
        load_study(path)
    message = str(info.value)
    assert message.startswith(str(path))
    assert "line 9" in message and "'channels.lnog'" in message
    assert "did you mean 'long'?" in message
    assert "\n" not in message


def test_misspelt_top_level_key(tmp_path):
    """Source: common practice - a "did you mean" for a mistyped top-level key."""
    path = _study(_tree(tmp_path), VALID.replace("corrections:", "corections:"))
    with pytest.raises(InputError, match=r"line 12, key 'corections'.*did you mean 'corrections'"):
        load_study(path)


def test_bad_value_names_key_and_line(tmp_path):
    """Source: common practice - a value error points at the value's line."""
    path = _study(_tree(tmp_path), VALID.replace("workers: 2", "workers: 0"))
    with pytest.raises(InputError, match=r"line 15, key 'workers'.*found 0"):
        load_study(path)
    path = _study(tmp_path, VALID.replace("alpha: 0.01", "alpha: 5"))
    with pytest.raises(InputError, match=r"key 'corrections.alpha'"):
        load_study(path)


def test_missing_required_key_and_conflicting_sources(tmp_path):
    """Source: common practice - required keys and mutually exclusive keys are checked."""
    _tree(tmp_path)
    with pytest.raises(InputError, match=r"key 'output'.*required key 'output'"):
        load_study(_study(tmp_path, VALID.replace("    output: results\n", "")))
    with pytest.raises(InputError, match="exactly one of 'cohort'"):
        load_study(_study(tmp_path, VALID + "    cohort: data\n"))


def test_missing_files_are_reported(tmp_path):
    """Source: common practice - a missing design or recording names the key that points at it."""
    _tree(tmp_path)
    with pytest.raises(InputError, match=r"key 'design': expected an existing design file"):
        load_study(_study(tmp_path, VALID.replace("designs/blocks.yaml", "designs/nope.yaml")))
    with pytest.raises(InputError, match=r"key 'recordings.1.path'"):
        load_study(_study(tmp_path, VALID.replace("sub-01_task", "sub-09_task")))


def test_invalid_yaml_names_the_line(tmp_path):
    """Source: common practice - YAML syntax errors carry the parser's line."""
    path = _study(tmp_path, "design: a.yaml\noutput: [unclosed\nworkers: 2\n")
    with pytest.raises(InputError, match=r"line \d+: expected valid YAML"):
        load_study(path)


def test_recording_stem():
    """Source: CONTRACTS.md section 1 - the stem is the name before _flow.tsv/.csv/_dcs.snirf."""
    assert recording_stem("a/sub-01_task-cue_run-2_flow.csv") == "sub-01_task-cue_run-2"
    assert recording_stem("sub-01_task-cue_dcs.snirf") == "sub-01_task-cue"


def test_group_model_errors_point_at_the_study_key(tmp_path):
    """Source: common practice - a group setting the group stage rejects names its study key."""
    _tree(tmp_path)
    with pytest.raises(InputError, match=r"key 'group.weighting'.*did you mean 'reml'"):
        load_study(_study(tmp_path, VALID.replace("weighting: unweighted", "weighting: rmel")))
    with pytest.raises(InputError, match=r"key 'corrections.method'"):
        load_study(_study(tmp_path, VALID.replace("method: holm", "method: sidak")))
    with pytest.raises(InputError, match=r"key 'group.options.grups'.*did you mean 'groups'"):
        load_study(
            _study(
                tmp_path,
                VALID.replace("weighting: unweighted", "grups: [a, b]")
                .replace("{kind: two-sample, ", "{kind: two-sample, options: {")
                .replace("[a, b]}", "[a, b]}}"),
            )
        )
    text = VALID.replace("weighting: unweighted}", "options: {groups: [younger, older]}}")
    assert load_study(_study(tmp_path, text)).group_options["groups"] == ("younger", "older")


@pytest.mark.skipif(
    not hasattr(__import__("fstats.fit").fit, "SubjectGLM"), reason="fit stage not available yet"
)
def test_fit_option_errors_are_found_before_any_subject_runs(tmp_path):
    """Source: common practice - a bad option fails at load time, naming the study key."""
    _tree(tmp_path)
    with pytest.raises(InputError, match=r"key 'fit.methd'.*did you mean 'method'"):
        load_study(_study(tmp_path, VALID.replace("{method: ols}", "{methd: ols}")))
    with pytest.raises(InputError, match=r"study.yaml, key 'fit.method'.*found 'olss'"):
        load_study(_study(tmp_path, VALID.replace("{method: ols}", "{method: olss}")))
