"""Benchmark: the subject page of a 30-minute, 20 Hz recording (target < 10 s, < 5 MB).

Simulates a 30-minute recording (fstats.simulate, demo scenario), builds the demo
block design, fits it (fstats.fit, not timed), then renders the subject page several
times and prints the median wall and CPU time, the page size and the figure-folder
size.  The reference measured in the same run is one plain matplotlib figure of the
full-resolution flow traces saved as PNG and SVG (what a page without trace thinning
would draw for its first figure alone); the ratio shows what the thinning buys.

Run: ``python benchmarks/bench_report.py [--repeats 3] [--minutes 30] [--method ar-irls]
[--reuse-fit]`` (the fit is pickled to ``benchmarks/results/``, git-ignored).
"""

from __future__ import annotations

import argparse
import io
import pickle
import statistics
import tempfile
import time
import warnings
from pathlib import Path

import numpy as np


def _timed(func):
    wall, cpu = time.perf_counter(), time.process_time()
    out = func()
    return out, time.perf_counter() - wall, time.process_time() - cpu


def _reference_traces(recording) -> None:
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    fig = Figure(figsize=(9, 5.5), layout="constrained")
    FigureCanvasAgg(fig)
    axes = fig.subplots(len(recording.channels), 1, sharex=True)
    for ax, name in zip(axes, recording.channel_names, strict=True):
        ax.plot(recording.times_s, recording.channel_flow(name), linewidth=0.6)
    fig.savefig(io.BytesIO(), format="png", dpi=96)
    fig.savefig(io.BytesIO(), format="svg")


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeats", type=int, default=3)
    parser.add_argument("--minutes", type=float, default=30.0)
    parser.add_argument("--method", default="ar-irls", help="subject GLM method for the fit")
    parser.add_argument(
        "--reuse-fit",
        action="store_true",
        help="reuse the fit pickled by an earlier run in benchmarks/results/ (same minutes/method)",
    )
    args = parser.parse_args()

    from fstats.design import build_design, load_design
    from fstats.fit.glm import SubjectGLM
    from fstats.report import subject_report
    from fstats.simulate import SimulationSettings, simulate_recording

    root = Path(__file__).resolve().parents[1]
    settings = SimulationSettings(duration_s=60.0 * args.minutes, sfreq_hz=20.0)
    recording = simulate_recording(settings, np.random.default_rng(2026)).recording
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        design = build_design(load_design(root / "designs" / "subtract_blocks.yaml"), recording)
        cache = (
            root / "benchmarks" / "results" / f"report_fit_{args.minutes:g}min_{args.method}.pkl"
        )
        if args.reuse_fit and cache.exists():
            fit, fit_wall = pickle.loads(cache.read_bytes()), float("nan")
        else:
            fit, fit_wall, _ = _timed(lambda: SubjectGLM(method=args.method).fit(recording, design))
            cache.parent.mkdir(parents=True, exist_ok=True)
            cache.write_bytes(pickle.dumps(fit))
    fit_note = "reused from cache" if fit_wall != fit_wall else f"{fit_wall:.1f} s"
    print(
        f"recording: {recording.duration_s / 60:.1f} min, {recording.sfreq_hz:g} Hz, "
        f"{recording.n_times} samples x {len(recording.channels)} channels "
        f"(fit {args.method}: {fit_note}, not counted)"
    )

    walls, cpus = [], []
    with tempfile.TemporaryDirectory() as tmp:
        page = Path(tmp) / "sub-bench_task-subtract.html"
        for _ in range(args.repeats):
            _, wall, cpu = _timed(lambda: subject_report(recording, design, fit, page))
            walls.append(wall)
            cpus.append(cpu)
        size_mb = page.stat().st_size / 1e6
        folder = page.parent / f"{page.stem}_figures"
        folder_mb = sum(p.stat().st_size for p in folder.iterdir()) / 1e6
        n_figures = len(list(folder.glob("*.png")))
    refs = [_timed(lambda: _reference_traces(recording))[1] for _ in range(args.repeats)]

    wall, cpu, ref = statistics.median(walls), statistics.median(cpus), statistics.median(refs)
    print(
        f"subject page: median wall {wall:.2f} s, median CPU {cpu:.2f} s "
        f"(target < 10 s), page {size_mb:.2f} MB (target < 5 MB), "
        f"{n_figures} figures, PNG+SVG folder {folder_mb:.2f} MB"
    )
    print(
        f"reference (one full-resolution traces figure, PNG+SVG): median wall {ref:.2f} s; "
        f"whole page / reference = {wall / ref:.2f}"
    )


if __name__ == "__main__":
    main()
