"""Benchmark of whole-study runs: 100 simulated subjects through ``fstats run``.

Measures, for a cohort of simulated recordings (default 100 subjects, 3 channels,
20 min at 20 Hz each):

* wall time of ``fstats run`` with 1 and 2 worker processes, statistics only, and
  with 2 workers plus HTML pages; the speed-up from 1 to 2 workers;
* peak memory: the largest sum of resident memory (VmRSS from /proc) over the
  whole process tree (main process + worker processes), sampled every 50 ms, and
  the largest single process (also cross-checked with ``resource.getrusage(RUSAGE_CHILDREN)``);
* per-subject time of each step (read, design, fit, write, report) from the done
  markers, to show which stage dominates;
* a reference: the same steps called in a plain loop in this process on the first
  subjects, no engine; the ratio engine/loop (1 worker) is the engine's overhead.

Targets (issue 7): statistics for 100 subjects under 60 s, peak memory under 2 GB,
speed-up from 1 to 2 workers at least 1.7x.

Usage::

    python benchmarks/bench_study.py                 # 100 subjects, 1200 s at 20 Hz
    python benchmarks/bench_study.py --subjects 20   # quicker look

The cohort is simulated once into ``benchmarks/results/`` (git-ignored) and reused.
"""

from __future__ import annotations

import argparse
import json
import os
import resource
import statistics
import subprocess
import sys
import tempfile
import textwrap
import threading
import time
from pathlib import Path

# The in-process reference loop runs with one BLAS thread, as the engine's workers do.
for _name in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_name, "1")

REPO = Path(__file__).resolve().parents[1]
RESULTS = REPO / "benchmarks" / "results"
DESIGN = REPO / "designs" / "subtract_blocks.yaml"


def _tree_pids(root: int) -> list[int]:
    """``root`` and all its descendants, from /proc/<pid>/task/<tid>/children."""
    pids, stack = [], [root]
    while stack:
        pid = stack.pop()
        pids.append(pid)
        try:
            for task in os.listdir(f"/proc/{pid}/task"):
                with open(f"/proc/{pid}/task/{task}/children") as handle:
                    stack.extend(int(c) for c in handle.read().split())
        except OSError:
            continue
    return pids


def _rss_bytes(pid: int) -> int:
    try:
        with open(f"/proc/{pid}/status") as handle:
            for line in handle:
                if line.startswith("VmRSS:"):
                    return int(line.split()[1]) * 1024
    except OSError:
        pass
    return 0


class _TreeMemory(threading.Thread):
    """Samples the summed resident memory of a process tree; keeps the peak."""

    def __init__(self, pid: int, every_s: float = 0.05) -> None:
        super().__init__(daemon=True)
        self.pid, self.every_s, self.peak_bytes, self.peak_single_bytes = pid, every_s, 0, 0
        self._halt = threading.Event()

    def run(self) -> None:
        while not self._halt.is_set():
            sizes = [_rss_bytes(p) for p in _tree_pids(self.pid)]
            self.peak_bytes = max(self.peak_bytes, sum(sizes))
            self.peak_single_bytes = max(self.peak_single_bytes, max(sizes, default=0))
            self._halt.wait(self.every_s)

    def stop(self) -> int:
        self._halt.set()
        self.join()
        return self.peak_bytes


def _cohort(n_subjects: int, duration_s: float, sfreq_hz: float, seed: int) -> Path:
    from fstats.simulate import SimulationSettings
    from fstats.simulate.cohort import simulate_cohort

    folder = RESULTS / f"study_cohort_{n_subjects}x{duration_s:g}s_{sfreq_hz:g}Hz_seed{seed}"
    if (folder / "participants.tsv").is_file():
        return folder
    started = time.perf_counter()
    settings = SimulationSettings(duration_s=duration_s, sfreq_hz=sfreq_hz)
    simulate_cohort(folder, n_per_group=n_subjects // 2, settings=settings, seed=seed)
    print(f"simulated {n_subjects} subjects in {time.perf_counter() - started:.1f} s -> {folder}")
    return folder


def _study_file(folder: Path, cohort: Path, name: str, reports: bool, first: int = 0) -> Path:
    """A study file over the whole cohort, or over its ``first`` recordings only."""
    if first:
        from fstats.inputs import find_recordings

        entries = find_recordings(cohort)[:first]
        listed = "".join(f"  - path: {e.path}\n" for e in entries)
        source = f"recordings:\n{listed}participants: {cohort / 'participants.tsv'}\n"
    else:
        source = f"cohort: {cohort}\n"
    path = folder / f"{name}.yaml"
    path.write_text(
        f"title: benchmark {name}\n"
        + source
        + textwrap.dedent(f"""\
            design: {DESIGN}
            channels: {{short: scalp}}
            group: {{kind: two-sample, options: {{groups: [older, younger]}}}}
            corrections: {{method: fdr}}
            output: out-{name}
            reports: {str(reports).lower()}
            """)
    )
    return path


def _run(study: Path, workers: int, *, reports: bool, force: bool = True) -> dict:
    command = [sys.executable, "-m", "fstats", "-q", "run", str(study), "--workers", str(workers)]
    command += [] if reports else ["--no-reports"]
    command += ["--force"] if force else []
    started = time.perf_counter()
    process = subprocess.Popen(command, stdout=subprocess.PIPE, stderr=subprocess.PIPE)
    sampler = _TreeMemory(process.pid)
    sampler.start()
    out, err = process.communicate()
    wall_s = time.perf_counter() - started
    peak = sampler.stop()
    if process.returncode not in (0, 1):
        raise SystemExit(f"fstats run failed ({process.returncode}):\n{err.decode()[-3000:]}")
    output = study.parent / f"out-{study.stem}"
    record = json.loads((output / "study.json").read_text())
    steps: dict[str, list[float]] = {}
    for subject in record["subjects"]:  # this run's subjects only
        marker = output / "subjects" / subject["stem"] / "done.json"
        if subject["status"] != "computed" or not marker.is_file():
            continue
        for step, seconds in json.loads(marker.read_text()).get("stage_seconds", {}).items():
            steps.setdefault(step, []).append(seconds)
    return {
        "load_average_1min": os.getloadavg()[0],
        "workers": workers,
        "reports": reports,
        "wall_s": wall_s,
        "run_s": record["seconds"],
        "timings": record.get("timings", {}),
        "counts": record["counts"],
        "peak_tree_mb": peak / 1e6,
        "max_process_mb": sampler.peak_single_bytes / 1e6,
        "max_rss_children_mb": resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss / 1024,
        "step_median_s": {k: statistics.median(v) for k, v in steps.items()},
        "step_total_s": {k: sum(v) for k, v in steps.items()},
    }


def _median_run(study: Path, workers: int, repeat: int) -> dict:
    """The statistics-only run with the median run time of ``repeat`` runs."""
    runs = sorted(
        (_run(study, workers, reports=False) for _ in range(repeat)), key=lambda r: r["run_s"]
    )
    chosen = dict(runs[len(runs) // 2])
    chosen["all_run_s"] = [r["run_s"] for r in runs]
    chosen["peak_tree_mb"] = max(r["peak_tree_mb"] for r in runs)
    return chosen


def _plain_loop(cohort: Path, n: int) -> float:
    """Median seconds per subject of the subject steps called directly (the reference)."""
    from fstats.design import build_design, load_design
    from fstats.fit import SubjectGLM, write_subject_results
    from fstats.inputs import find_recordings, read_recording

    entries = find_recordings(cohort)[:n]
    times = []
    with tempfile.TemporaryDirectory() as scratch:
        for entry in entries:
            started = time.perf_counter()
            recording = read_recording(entry.path)
            spec = load_design(DESIGN)
            design = build_design(spec, recording)
            # as the engine fits in a statistics-only run: no block-averaged time courses
            options = {**dict(spec.fit_options), "block_averages": False}
            fit = SubjectGLM(**options).fit(recording, design)
            write_subject_results(fit, Path(scratch), entry.stem, provenance={})
            times.append(time.perf_counter() - started)
    return statistics.median(times)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    parser.add_argument("--subjects", type=int, default=100)
    parser.add_argument("--duration-s", type=float, default=1200.0)
    parser.add_argument("--sfreq-hz", type=float, default=20.0)
    parser.add_argument("--seed", type=int, default=7)
    parser.add_argument("--reference-subjects", type=int, default=5)
    parser.add_argument("--skip-reports", action="store_true", help="statistics-only runs")
    parser.add_argument(
        "--repeat", type=int, default=1, help="run each statistics configuration N times (median)"
    )
    parser.add_argument(
        "--report-subjects",
        type=int,
        default=0,
        help="run the with-pages configuration on the first N subjects only (0 = all)",
    )
    args = parser.parse_args()

    RESULTS.mkdir(parents=True, exist_ok=True)
    cohort = _cohort(args.subjects, args.duration_s, args.sfreq_hz, args.seed)
    work = RESULTS / f"study_bench_{cohort.name}"
    work.mkdir(exist_ok=True)
    stats = _study_file(work, cohort, "stats", reports=False)
    pages = _study_file(work, cohort, "pages", reports=True, first=args.report_subjects)
    n_pages = args.report_subjects or args.subjects

    runs = {
        "stats, 1 worker": _median_run(stats, 1, args.repeat),
        "stats, 2 workers": _median_run(stats, 2, args.repeat),
        "stats, 2 workers, all reused": _run(stats, 2, reports=False, force=False),
    }
    if not args.skip_reports:
        runs[f"stats + pages, 2 workers ({n_pages} subj)"] = _run(pages, 2, reports=True)
    reference_s = _plain_loop(cohort, args.reference_subjects)

    print(
        f"\n{args.subjects} subjects x 3 channels x {args.duration_s:g} s at "
        f"{args.sfreq_hz:g} Hz, {os.cpu_count()} CPU cores"
    )
    print("machine load (1-min load average at the end of each run; >2 means shared cores):")
    print("  " + ", ".join(f"{k}: {r['load_average_1min']:.1f}" for k, r in runs.items()))
    print(f"{'run':32} {'wall s':>8} {'run s':>8} {'peak tree MB':>13} {'max proc MB':>12}  counts")
    for name, run in runs.items():
        single = f"{run['max_process_mb']:.0f}"
        print(
            f"{name:32} {run['wall_s']:8.1f} {run['run_s']:8.1f} {run['peak_tree_mb']:13.0f} "
            f"{single:>12}  {run['counts']}"
        )
    one, two = runs["stats, 1 worker"], runs["stats, 2 workers"]
    print(f"\nspeed-up 1 -> 2 workers (run s): {one['run_s'] / two['run_s']:.2f}x (target >= 1.7x)")
    print(f"statistics, 2 workers: {two['run_s']:.1f} s (target < 60 s)")
    print(f"  all run times: 1 worker {one['all_run_s']}, 2 workers {two['all_run_s']}")
    peak = max(r["peak_tree_mb"] for r in runs.values())
    print(f"peak memory (sum over processes): {peak:.0f} MB (target < 2000 MB)")
    print("\nper-subject step medians (s), 1-worker statistics run:")
    for step, seconds in one["step_median_s"].items():
        print(f"  {step:8} {seconds:7.3f}   total {one['step_total_s'][step]:7.1f} s")
    for name, run in runs.items():
        if "pages" in name:
            print(f"per-subject step medians (s), {name}:")
            for step, seconds in run["step_median_s"].items():
                print(f"  {step:8} {seconds:7.3f}")
            print(f"  per subject {run['run_s'] / n_pages:.2f} s of run time with 2 workers")
    print(
        f"cohort level (group model, cohort page) of each run: "
        f"{ {k: r['timings'] for k, r in runs.items()} }"
    )
    engine_per_subject = one["run_s"] / args.subjects
    print(
        f"\nreference: plain in-process loop, median {reference_s:.3f} s/subject "
        f"(first {args.reference_subjects}); engine with 1 worker {engine_per_subject:.3f} "
        f"s/subject; ratio engine/loop {engine_per_subject / reference_s:.2f}"
    )
    (RESULTS / "bench_study.json").write_text(json.dumps(runs, indent=2, default=str))


if __name__ == "__main__":
    main()
