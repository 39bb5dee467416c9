"""Tests of fstats/study/engine.py with stand-in task functions (no statistics involved).

The stand-ins (tests/study/_study_standin.py) read the task's recording file and
write a small table, so scheduling, failure isolation, markers and atomic
placement are tested independently of the subject stages.
"""

import json
import logging
import uuid

import _study_standin as standin
import pytest

from fstats.errors import InputError
from fstats.study.engine import one_line_error, run_subject_task, run_tasks
from fstats.study.ledger import DONE_MARKER, FAILED_MARKER
from fstats.study.task import SubjectTask


def _tasks(tmp_path, contents, *, reports=False):
    data = tmp_path / "data"
    data.mkdir(exist_ok=True)
    subjects = tmp_path / "out" / "subjects"
    subjects.mkdir(parents=True, exist_ok=True)
    tasks = []
    for stem, body in contents.items():
        path = data / f"{stem}_flow.tsv"
        path.write_bytes(body)
        tasks.append(
            SubjectTask(
                participant_id=stem.split("_")[0],
                session=None,
                stem=stem,
                recording_path=str(path),
                design_path=str(tmp_path / "design.yaml"),
                output_dir=str(subjects / stem),
                work_dir=str(subjects / f".work-{stem}-{uuid.uuid4().hex[:8]}"),
                key=f"key-{stem}",
                reports=reports,
            )
        )
    return tasks


def _tree_bytes(folder):
    return {
        p.relative_to(folder).as_posix(): p.read_bytes()
        for p in sorted(folder.rglob("*"))
        if p.is_file() and p.name not in (DONE_MARKER, FAILED_MARKER)
    }


COHORT = {
    "sub-01_task-subtract": b"time\tscalp\n0\t1.0\n",
    "sub-02_task-subtract": b"time\tscalp\ncorrupt\n",
    "sub-03_task-subtract": b"time\tscalp\n0\tdivide\n",
    "sub-04_task-subtract": b"time\tscalp\n0\t2.0\nwarn\n",
}


def test_failures_are_isolated_and_recorded_in_one_line(tmp_path):
    """Source: common practice - one failing subject must not stop a cohort run, and worker
    processes report through the main process rather than writing to the console."""
    tasks = _tasks(tmp_path, COHORT)
    outcomes = run_tasks(tasks, standin.summarise, workers=2)
    assert [o.stem for o in outcomes] == list(COHORT)  # task order, not completion order
    assert [o.status for o in outcomes] == ["computed", "failed", "failed", "computed"]
    bad_input, crash = outcomes[1], outcomes[2]
    assert bad_input.error.endswith("line 2: expected a number, found 'corrupt'")
    assert crash.error == "ZeroDivisionError: division by zero"
    for outcome in (bad_input, crash):
        assert "\n" not in outcome.error and "Traceback" not in outcome.error
        folder = tmp_path / "out" / "subjects" / outcome.stem
        marker = json.loads((folder / FAILED_MARKER).read_text())
        assert marker["error"] == outcome.error and marker["status"] == "failed"
        assert "Traceback (most recent call last)" in (folder / "error.log").read_text()
        assert not (folder / DONE_MARKER).exists()
    for outcome in (outcomes[0], outcomes[3]):
        folder = tmp_path / "out" / "subjects" / outcome.stem
        marker = json.loads((folder / DONE_MARKER).read_text())
        assert marker["key"] == f"key-{outcome.stem}"
        assert (folder / marker["files"]["results"]).is_file()
    # worker log records and warnings come back with the outcome, not on the worker's console
    warned = outcomes[3]
    assert (logging.WARNING, "fstats.fit.standin", "flow looks flat") in warned.messages
    assert (logging.WARNING, "py.warnings", "FitWarning: AR fit did not settle") in warned.messages
    marker = json.loads((tmp_path / "out" / "subjects" / warned.stem / DONE_MARKER).read_text())
    assert "FitWarning: AR fit did not settle" in marker["warnings"]
    # no work folders left behind
    assert sorted(p.name for p in (tmp_path / "out" / "subjects").iterdir()) == sorted(COHORT)


def test_processes_inline_and_dask_write_identical_files(tmp_path):
    """Source: common practice - the scheduler must not change results (same function, inputs)."""
    distributed = pytest.importorskip("dask.distributed")
    trees = {}
    for name in ("inline", "processes", "dask"):
        folder = tmp_path / name
        folder.mkdir()
        tasks = _tasks(folder, COHORT, reports=True)
        if name == "dask":
            with (
                distributed.LocalCluster(
                    n_workers=2, threads_per_worker=1, processes=False, dashboard_address=None
                ) as cluster,
                distributed.Client(cluster) as client,
            ):
                outcomes = run_tasks(tasks, standin.summarise, scheduler=client)
        else:
            outcomes = run_tasks(tasks, standin.summarise, workers=2, scheduler=name)
        assert [o.status for o in outcomes] == ["computed", "failed", "failed", "computed"]
        trees[name] = _tree_bytes(folder / "out")
    # error.log holds tracebacks whose frames differ by scheduler; everything else is equal
    for tree in trees.values():
        for name in [n for n in tree if n.endswith("error.log")]:
            del tree[name]
    assert trees["inline"] == trees["processes"] == trees["dask"]
    assert "subjects/sub-01_task-subtract/report.html" in trees["inline"]


def test_a_dead_worker_fails_its_subject_not_the_run(tmp_path):
    """Source: common practice - a worker killed by the OS fails its subject; others complete."""
    contents = {"sub-01_task-subtract": b"die\n"}
    contents.update({f"sub-0{i}_task-subtract": f"ok {i}\n".encode() for i in (2, 3, 4)})
    tasks = _tasks(tmp_path, contents)
    outcomes = run_tasks(tasks, standin.die, workers=2)
    assert [o.status for o in outcomes] == ["failed", "computed", "computed", "computed"]
    assert outcomes[0].error.startswith("worker lost:")
    assert sorted(p.name for p in (tmp_path / "out" / "subjects").iterdir()) == sorted(
        list(contents)[1:]
    )


def test_run_subject_task_refuses_to_reuse_a_work_folder(tmp_path):
    """Source: common practice - a work folder belongs to exactly one attempt."""
    (task,) = _tasks(tmp_path, {"sub-01_task-subtract": b"x\n"})
    run_subject_task(standin.summarise, task)
    (tmp_path / "again").mkdir()
    task2 = task.__class__(**{**task.__dict__, "work_dir": str(tmp_path / "again")})
    with pytest.raises(FileExistsError):
        run_subject_task(standin.summarise, task2)


def test_one_line_error():
    """Source: common practice - an InputError keeps its message, others gain their type."""
    assert one_line_error(InputError("f.tsv", "line 3", "a number", "x")) == (
        "f.tsv, line 3: expected a number, found 'x'"
    )
    assert one_line_error(KeyError("frontal_c")) == "KeyError: 'frontal_c'"
    assert one_line_error(RuntimeError("two\nlines")) == "RuntimeError: two lines"
    assert len(one_line_error(RuntimeError("x" * 5000))) == 400
