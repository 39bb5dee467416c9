"""End-to-end tests of fstats/study/run.py on a small simulated cohort (the real stages).

Checks the acceptance points of whole-study runs: a Dask LocalCluster gives the same
files as local worker processes; a corrupt recording fails alone with a one-line
error; a run killed with SIGKILL resumes, reusing finished subjects.
"""

import json
import os
import signal
import subprocess
import sys
import textwrap
import time
from pathlib import Path

import pandas as pd
import pytest

import fstats.fit

pytestmark = pytest.mark.skipif(
    not hasattr(fstats.fit, "SubjectGLM"), reason="fit stage not available yet"
)

REPO = Path(__file__).resolve().parents[2]
DESIGN = REPO / "designs" / "subtract_blocks.yaml"


@pytest.fixture(scope="module")
def cohort(tmp_path_factory):
    """Four simulated subjects (two per group), 255 s (three task cycles) at 10 Hz."""
    from fstats.simulate import SimulationSettings
    from fstats.simulate.cohort import simulate_cohort

    settings = SimulationSettings(duration_s=255.0, sfreq_hz=10.0)
    return simulate_cohort(
        tmp_path_factory.mktemp("cohort") / "cohort", n_per_group=2, settings=settings, seed=3
    )


TWO_GROUPS = "{kind: two-sample, options: {groups: [older, younger]}}"


def _study(folder, cohort, *, reports=False, workers=2, group=TWO_GROUPS):
    folder.mkdir(parents=True, exist_ok=True)
    path = folder / "study.yaml"
    path.write_text(
        textwrap.dedent(f"""\
            title: test study
            cohort: {cohort}
            design: {DESIGN}
            channels: {{short: scalp}}
            group: {group}
            corrections: {{method: fdr}}
            output: out
            reports: {str(reports).lower()}
            workers: {workers}
            """)
    )
    return path


def _tables(output):
    """Every subject and group TSV of an output folder, as bytes by relative path."""
    return {
        p.relative_to(output).as_posix(): p.read_bytes()
        for p in sorted(output.rglob("*.tsv"))
        if p.name != "subjects.tsv"
    }


def _check_every_file_parses(output):
    """Every TSV and JSON below ``output`` is complete: it parses, and no temp file is left."""
    leftovers = [p for p in output.rglob("*") if p.name.startswith((".work-", ".old-"))]
    leftovers += [p for p in output.rglob("*.tmp")]
    assert not leftovers, leftovers
    n = 0
    for path in output.rglob("*"):
        if path.suffix == ".tsv":
            table = pd.read_csv(path, sep="\t")
            assert len(table.columns) > 1, path
            n += 1
        elif path.suffix == ".json":
            json.loads(path.read_text())
            n += 1
    return n


@pytest.mark.slow
def test_dask_local_cluster_matches_local_processes(tmp_path, cohort):
    """Source: common practice - the scheduler must not change results (same tasks, same code)."""
    pytest.importorskip("dask.distributed")
    from fstats.study import run_study

    local = run_study(_study(tmp_path / "local", cohort), workers=2)
    # a LocalCluster of two single-threaded worker processes, started and stopped by the run
    distributed = run_study(_study(tmp_path / "dask", cohort), scheduler="local-cluster")
    assert [s.status for s in local.subjects] == ["computed"] * 4
    assert [s.status for s in distributed.subjects] == ["computed"] * 4
    first, second = _tables(tmp_path / "local" / "out"), _tables(tmp_path / "dask" / "out")
    assert len(first) >= 5 and any(name.startswith("group/") for name in first)
    assert first == second  # byte for byte
    assert local.exit_code == 0


@pytest.mark.slow
def test_corrupt_recording_fails_alone(tmp_path, cohort):
    """Source: common practice - one unreadable recording must not stop the cohort; the cohort
    page lists it with its one-line error."""
    import html
    import shutil

    from fstats.study import regroup, run_study

    copy = tmp_path / "cohort"
    shutil.copytree(cohort, copy)
    flow = copy / "sub-02" / "sub-02_task-subtract_flow.tsv"
    lines = flow.read_text().splitlines(keepends=True)
    cells = lines[10].split("\t")
    lines[10] = "\t".join([cells[0], "not-a-number", *cells[2:]])
    flow.write_text("".join(lines))
    # statistics first (subject pages are slow); then the cohort page alone via regroup
    # one-sample: with two subjects per group a failure would leave a group of one
    study = _study(tmp_path / "run", copy, reports=True, group="{kind: one-sample}")
    outcome = run_study(study, workers=2, reports=False)
    (failure,) = outcome.failures
    assert failure["participant_id"] == "sub-02"
    assert "line 11" in failure["error"] and "\n" not in failure["error"]
    assert outcome.exit_code == 1
    assert [s.status for s in outcome.subjects] == ["computed", "failed", "computed", "computed"]
    assert outcome.group_files and not outcome.group_error
    summary = pd.read_csv(tmp_path / "run" / "out" / "subjects.tsv", sep="\t")
    assert summary.loc[1, "status"] == "failed" and summary.loc[1, "error"] == failure["error"]
    regrouped = regroup(study)
    assert regrouped.failures == outcome.failures and regrouped.exit_code == 1
    page = html.unescape(regrouped.cohort_page.read_text())
    assert "sub-02" in page and "line 11" in page and "not-a-number" in page
    _check_every_file_parses(tmp_path / "run" / "out")


def _markers(folder):
    """Done markers of finished subjects (not of work folders about to be renamed)."""
    return [p for p in folder.glob("*/done.json") if not p.parent.name.startswith(".")]


def _wait_for_marker(folder, process, timeout_s=240.0):
    deadline = time.monotonic() + timeout_s
    while time.monotonic() < deadline:
        if _markers(folder):
            return True
        if process.poll() is not None:
            return False
        time.sleep(0.02)
    return False


@pytest.fixture(scope="module")
def longer_cohort(tmp_path_factory):
    """Eight simulated subjects of 900 s at 10 Hz: a run long enough to be killed part-way
    (a fit of the small cohort above finishes between two polls of the kill test)."""
    from fstats.simulate import SimulationSettings
    from fstats.simulate.cohort import simulate_cohort

    settings = SimulationSettings(duration_s=900.0, sfreq_hz=10.0)
    return simulate_cohort(
        tmp_path_factory.mktemp("longer") / "cohort", n_per_group=4, settings=settings, seed=4
    )


@pytest.mark.slow
def test_killed_run_resumes_without_recomputing_finished_subjects(tmp_path, longer_cohort):
    """Source: common practice - resume after SIGKILL: done markers written last, atomic renames."""
    cohort, n_subjects = longer_cohort, 8
    study = _study(tmp_path, cohort, workers=1)
    subjects = tmp_path / "out" / "subjects"
    command = [sys.executable, "-m", "fstats", "run", str(study), "--no-reports"]
    process = subprocess.Popen(
        command, stdout=subprocess.PIPE, stderr=subprocess.PIPE, start_new_session=True
    )
    try:
        assert _wait_for_marker(subjects, process), process.communicate()[1].decode()
        os.kill(process.pid, signal.SIGKILL)
        process.wait(timeout=30)
        # the worker processes notice their parent is gone and exit by themselves
        deadline = time.monotonic() + 15.0
        while time.monotonic() < deadline:
            try:
                os.killpg(process.pid, 0)
            except ProcessLookupError:
                break
            time.sleep(0.1)
        else:
            pytest.fail("worker processes outlived the killed run")
    finally:
        try:
            os.killpg(process.pid, signal.SIGKILL)
        except ProcessLookupError:
            pass
    finished = {p.parent.name: p.stat().st_mtime_ns for p in _markers(subjects)}
    assert 1 <= len(finished) < n_subjects, "the kill must land part-way through the run"

    rerun = subprocess.run(command, capture_output=True, text=True, timeout=300)
    assert rerun.returncode == 0, rerun.stderr
    for stem, mtime in finished.items():
        assert f"{stem}: reused" in rerun.stderr
        assert (subjects / stem / "done.json").stat().st_mtime_ns == mtime
    record = json.loads((tmp_path / "out" / "study.json").read_text())
    assert record["counts"] == {
        "computed": n_subjects - len(finished),
        "reused": len(finished),
        "failed": 0,
    }
    assert len(_markers(subjects)) == n_subjects
    assert _check_every_file_parses(tmp_path / "out") >= n_subjects * 3 + 2


def test_regroup_reruns_only_the_group_level(tmp_path, cohort):
    """Source: common practice - changing the group model must not refit any subject."""
    from fstats.study import regroup, run_study

    study = _study(tmp_path, cohort)
    first = run_study(study, workers=2)
    markers = {p: p.stat().st_mtime_ns for p in (tmp_path / "out").glob("subjects/*/done.json")}
    assert len(markers) == 4
    group_table = first.group_files[0]
    before = pd.read_csv(group_table, sep="\t")
    study.write_text(study.read_text().replace("method: fdr", "method: bonferroni"))
    again = regroup(study)
    assert [s.status for s in again.subjects] == ["reused"] * 4
    assert {p: p.stat().st_mtime_ns for p in markers} == markers
    after = pd.read_csv(again.group_files[0], sep="\t")
    assert after["p"].tolist() == before["p"].tolist()  # same subject results, same tests
    assert (after["p_adjusted"] >= before["p_adjusted"] - 1e-12).all()  # Bonferroni >= BH
    assert again.exit_code == 0
