"""Benchmark of ``build_design`` on a 30-minute, 20 Hz recording with cardiac terms.

Workload (issue 3): the demo block design ``designs/subtract_blocks.yaml`` (two flow-response
conditions, cosine drift with a 170 s cutoff, the scalp short-channel regressor, RETROICOR
cardiac terms M=2 detected from the scalp channel) on a simulated 30-minute recording at
20 Hz (36,000 samples, 3 channels) from ``fstats.simulate``.

* full: ``build_design`` end to end (timing, regressors on a 100 Hz grid averaged over each
  sample, drift, short channel, heartbeat detection + RETROICOR, diagnostics); median of
  ``--repeats`` runs.
* task regressors: fstats' FFT convolution on the 100 Hz grid against the same stimulus
  convolved with ``scipy.signal.convolve(method="direct")`` (reference), timed in this run.
* diagnostics: fstats' VIFs from one cross-product matrix against
  ``statsmodels.stats.outliers_influence.variance_inflation_factor`` (one OLS per column);
  statsmodels is timed on 4 columns and extrapolated to all of them.

Usage::

    python benchmarks/bench_design.py               # 30 minutes
    python benchmarks/bench_design.py --minutes 10  # quicker look
"""

from __future__ import annotations

import argparse
import statistics
import sys
import time
import warnings
from pathlib import Path

import numpy as np
from scipy import signal
from statsmodels.stats.outliers_influence import variance_inflation_factor

from fstats.design import build_design, load_design
from fstats.design.diagnostics import variance_inflation
from fstats.design.regressors import (
    average_to_samples,
    convolve_on_grid,
    fine_grid,
    stimulus_on_grid,
)
from fstats.design.response import response_kernel
from fstats.design.timing import design_events
from fstats.simulate import SimulationSettings, simulate_recording

DESIGN = Path(__file__).resolve().parents[1] / "designs" / "subtract_blocks.yaml"


def _median_time(func, repeats: int) -> float:
    times = []
    for _ in range(repeats):
        start = time.perf_counter()
        func()
        times.append(time.perf_counter() - start)
    return statistics.median(times)


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--minutes", type=float, default=30.0)
    parser.add_argument("--repeats", type=int, default=7)
    args = parser.parse_args(argv)

    sim = simulate_recording(
        SimulationSettings(duration_s=args.minutes * 60.0, sfreq_hz=20.0),
        np.random.default_rng(0),
    )
    rec = sim.recording
    spec = load_design(DESIGN)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        build_design(spec, rec)  # warm-up (imports, FFT plans)
        full = _median_time(lambda: build_design(spec, rec), args.repeats)
        design = build_design(spec, rec)

    # task regressors: FFT vs direct convolution of the same fine-grid stimulus
    times = rec.times_s
    oversample, fine_step = fine_grid(times[0], float(np.median(np.diff(times))), times.size)
    events = design_events(spec, rec).select("subtract")
    stim = stimulus_on_grid(
        events.onsets_s,
        events.durations_s,
        events.amplitudes,
        start_s=float(times[0]),
        fine_step_s=fine_step,
        n_fine=times.size * oversample,
    )
    kernel = response_kernel("flow", {}, fine_step)

    def ours():
        return average_to_samples(convolve_on_grid(stim, kernel, fine_step), oversample)

    def reference():
        out = signal.convolve(stim, kernel, mode="full", method="direct")[: stim.size]
        return average_to_samples(out * fine_step, oversample)

    fft_time = _median_time(ours, args.repeats)
    direct_time = _median_time(reference, max(1, args.repeats // 2))
    max_diff = float(np.max(np.abs(ours() - reference())))

    # diagnostics: VIFs
    names, kinds, values = design.names, design.kinds, design.values
    vif_time = _median_time(lambda: variance_inflation(values, names, kinds), args.repeats)
    cols = [i for i, k in enumerate(kinds) if k != "constant"]
    subset = cols[:: max(1, len(cols) // 4)][:4]  # statsmodels is slow: time 4 columns
    per_column = [_median_time(lambda i=i: variance_inflation_factor(values, i), 1) for i in subset]
    sm_time = statistics.median(per_column) * len(cols)  # extrapolated to all columns
    ours_vif = variance_inflation(values, names, kinds)
    vif_rel = max(
        abs(ours_vif[names[i]] - variance_inflation_factor(values, i))
        / variance_inflation_factor(values, i)
        for i in subset
    )

    card = design.info["cardiac"]
    print(
        f"recording: {args.minutes:g} min at 20 Hz, {rec.n_times} samples, "
        f"{design.n_regressors} columns ({', '.join(sorted(set(kinds)))})"
    )
    print(f"full build_design: median {full * 1e3:.1f} ms over {args.repeats} runs")
    print(
        f"  heart rate {card['heart_rate_bpm']:.2f} bpm (simulated "
        f"{sim.truth['heart_rate_bpm']:.2f}), {card['n_beats']} beats, "
        f"quality {card['beat_quality']:.3f}"
    )
    print(
        f"task regressor (100 Hz grid): FFT {fft_time * 1e3:.2f} ms, scipy direct "
        f"{direct_time * 1e3:.1f} ms, ratio {direct_time / fft_time:.1f}x, "
        f"max |diff| {max_diff:.2e}"
    )
    print(
        f"VIFs ({len(cols)} columns): fstats {vif_time * 1e3:.2f} ms, statsmodels loop "
        f"{sm_time * 1e3:.1f} ms (extrapolated from {len(subset)} columns), "
        f"ratio {sm_time / vif_time:.1f}x, max rel diff {vif_rel:.1e}"
    )
    return 0


if __name__ == "__main__":
    sys.exit(main())
