"""Tests of the resume logic in fstats/study/run.py (plan_tasks), with a stand-in task function."""

import os
import textwrap
from pathlib import Path

import _study_standin as standin

from fstats.study.engine import run_tasks
from fstats.study.run import plan_tasks
from fstats.study.studyfile import load_study

DESIGN = Path(__file__).resolve().parents[2] / "designs" / "subtract_blocks.yaml"


def _study(tmp_path, *, fit="{}"):
    data = tmp_path / "cohort"
    for pid in ("sub-01", "sub-02", "sub-03"):
        folder = data / pid
        folder.mkdir(parents=True, exist_ok=True)
        (folder / f"{pid}_task-subtract_flow.tsv").write_text(f"time\tscalp\n0\t{pid[-1]}\n")
        (folder / f"{pid}_task-subtract_events.tsv").write_text("onset\tduration\ttrial_type\n")
    (tmp_path / "design.yaml").write_text(DESIGN.read_text())
    path = tmp_path / "study.yaml"
    path.write_text(
        textwrap.dedent(f"""\
            recordings:
              - path: cohort/sub-01/sub-01_task-subtract_flow.tsv
              - path: cohort/sub-02/sub-02_task-subtract_flow.tsv
              - path: cohort/sub-03/sub-03_task-subtract_flow.tsv
            design: design.yaml
            fit: {fit}
            output: out
            """)
    )
    return path


def _run(spec, *, reports=False, force=False):
    reused, tasks = plan_tasks(spec, reports=reports, force=force)
    run_tasks([tasks[i] for i in sorted(tasks)], standin.summarise, scheduler="inline")
    return sorted(reused), sorted(tasks)


def test_second_run_reuses_every_finished_subject(tmp_path):
    """Source: common practice - unchanged inputs and options are not recomputed."""
    spec = load_study(_study(tmp_path))
    assert _run(spec) == ([], [0, 1, 2])
    marker = spec.output_dir / "subjects" / "sub-02_task-subtract" / "done.json"
    before = os.stat(marker).st_mtime_ns
    assert _run(spec) == ([0, 1, 2], [])
    assert os.stat(marker).st_mtime_ns == before


def test_changed_sidecar_reruns_only_that_subject(tmp_path):
    """Source: common practice - a sidecar is an input: its hash is part of the subject's key."""
    spec = load_study(_study(tmp_path))
    _run(spec)
    events = tmp_path / "cohort" / "sub-03" / "sub-03_task-subtract_events.tsv"
    events.write_text("onset\tduration\ttrial_type\n20\t40\tsubtract\n")
    assert _run(spec) == ([0, 1], [2])


def test_changed_design_or_fit_options_rerun_everything(tmp_path):
    """Source: common practice - options are part of every subject's key."""
    path = _study(tmp_path)
    spec = load_study(path)
    _run(spec)
    (tmp_path / "design.yaml").write_text(DESIGN.read_text() + "# one more comment\n")
    assert _run(spec) == ([], [0, 1, 2])
    spec = load_study(_study(tmp_path, fit="{max_ar_order: 3}"))
    assert _run(spec) == ([], [0, 1, 2])


def test_missing_report_or_damaged_marker_or_force_reruns(tmp_path):
    """Source: common practice - a marker is trusted only when it covers what is asked for."""
    spec = load_study(_study(tmp_path))
    _run(spec)  # statistics only
    assert _run(spec, reports=True) == ([], [0, 1, 2])  # pages now wanted
    assert _run(spec, reports=False) == ([0, 1, 2], [])  # pages are extra: still reusable
    (spec.output_dir / "subjects" / "sub-01_task-subtract" / "done.json").write_text("{")
    (spec.output_dir / "subjects" / "sub-02_task-subtract" / "report.html").unlink()
    assert _run(spec, reports=True) == ([2], [0, 1])
    assert _run(spec, force=True) == ([], [0, 1, 2])


def test_failed_subjects_are_retried(tmp_path):
    """Source: common practice - a failure may be transient, so it is never reused."""
    spec = load_study(_study(tmp_path))
    (tmp_path / "cohort" / "sub-01" / "sub-01_task-subtract_flow.tsv").write_text("corrupt\n")
    _run(spec)
    assert (spec.output_dir / "subjects" / "sub-01_task-subtract" / "failed.json").is_file()
    assert _run(spec) == ([1, 2], [0])
