"""Benchmark of the batched g2 fitter against a scipy ``curve_fit`` loop, in one run.

Workload (issue 8): a 30-minute recording at 20 Hz with 2 channels (1.0 cm scalp and
3.0 cm brain-sensitive), i.e. 72,000 g2 curves of 100 lags (multi-tau, 1 µs - 49 ms).
BFi pulses with the heart (1.2 Hz, 10 %) around 0.6e-8 / 1.1e-8 cm²/s with slow drift;
β ~ 0.5; photon noise from the Zhou et al. 2006 form (recalled from memory) at
150 kcounts/s (scalp) and 60 kcounts/s (brain).  Both methods get the same curves, the
same per-lag σ weights and the same model (semi-infinite fluence, log BFi and β free).

* batched: ``fstats.flow.fit_g2`` on all 72,000 curves; median of ``--repeats`` runs.
* reference: ``scipy.optimize.curve_fit`` (MINPACK LM, numerical Jacobian, its default
  tolerances) curve by curve, with a lean closed-form model (constants precomputed): the
  same model and optical constants, all 100 lags (no fit range; fit_g2's dropping of lags
  whose model is below 1e-6 σ is part of its method, their constant χ² term is kept),
  the same σ, log BFi and β free, start (log 1e-8, 0.5) near the truth.  A data-derived
  start like fit_g2's (β from the first lags, BFi from the 1/e crossing) was tried for
  the reference: the same median of 13 function evaluations per curve, no faster.  The
  loop is timed on a random subset (``--subset`` curves, default 2,000) in 8 blocks; the
  per-curve time is the median over blocks and is *extrapolated* to all curves.
* timing: wall (``perf_counter``) and CPU (``process_time``) time, medians and best of
  the repeats; BLAS is pinned to one thread (neither method gains from more here).
* accuracy: on the subset, the median |relative BFi error| against the simulated truth
  for both methods, and the per-curve difference between them.
* memory: peak traced allocation of one batched fit (``tracemalloc``, a separate run) and
  the process's peak resident size (``resource.getrusage``).

Usage::

    python benchmarks/bench_g2_fit.py                # full size
    python benchmarks/bench_g2_fit.py --minutes 3    # quicker look
"""

from __future__ import annotations

import os

for _name in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_name, "1")  # before numpy: no BLAS thread contention

import argparse  # noqa: E402
import resource  # noqa: E402
import statistics  # noqa: E402
import sys  # noqa: E402
import time  # noqa: E402
import tracemalloc  # noqa: E402

import numpy as np  # noqa: E402
from scipy.optimize import curve_fit  # noqa: E402

from fstats.flow import fit_g2, g1_semi_infinite, g2_from_g1, g2_noise_sd, multi_tau_lags  # noqa: E402
from fstats.flow.forward import effective_reflection  # noqa: E402


def simulate(minutes: float, rng: np.random.Generator):
    """Curves (n_curves, n_lags), σ, true BFi, separations and lags for the workload."""
    fs = 20.0
    t = np.arange(0.0, minutes * 60.0, 1.0 / fs)
    lags = multi_tau_lags(100)
    curves, sigmas, truths, rhos = [], [], [], []
    for rho, base, rate in [(1.0, 0.6e-8, 150e3), (3.0, 1.1e-8, 60e3)]:
        drift = 1.0 + 0.05 * np.sin(2 * np.pi * t / 300.0)
        bfi = base * drift * (1.0 + 0.10 * np.sin(2 * np.pi * 1.2 * t))
        beta = 0.5 + 0.01 * rng.standard_normal(t.size)
        g1 = g1_semi_infinite(lags, bfi, separation_cm=rho)
        tau_e = lags[np.argmin(np.abs(g1 - np.exp(-1)), axis=1)]
        sd = g2_noise_sd(
            lags, beta=beta, decay_rate_hz=1 / tau_e, count_rate_hz=rate, integration_time_s=1 / fs
        )
        curves.append(g2_from_g1(g1, beta) + sd * rng.standard_normal(g1.shape))
        sigmas.append(sd)
        truths.append(bfi)
        rhos.append(np.full(t.size, rho))
    return np.vstack(curves), np.vstack(sigmas), np.concatenate(truths), np.concatenate(rhos), lags


def lean_model(rho: float):
    """Closed-form g2(τ; log BFi, β) with constants precomputed (a fair ad-hoc script)."""
    mua, musp, n, wl = 0.1, 10.0, 1.4, 785e-7
    reff = effective_reflection(n)
    k0sq = (2 * np.pi * n / wl) ** 2
    z0 = 1 / musp
    zb = 2 * (1 + reff) / (3 * musp * (1 - reff))
    r1, r2 = np.hypot(rho, z0), np.hypot(rho, z0 + 2 * zb)
    ks = 3 * mua * musp
    k_0 = np.sqrt(ks)
    norm = np.exp(-k_0 * r1) / r1 - np.exp(-k_0 * r2) / r2

    def model(tau, log_bfi, beta):
        k = np.sqrt(ks + 6 * musp**2 * k0sq * np.exp(log_bfi) * tau)
        g1 = (np.exp(-k * r1) / r1 - np.exp(-k * r2) / r2) / norm
        return 1 + beta * g1 * g1

    return model


def curve_fit_loop(g2, sigma, rhos, lags, rows):
    """curve_fit on the given rows; returns BFi per row (NaN where it failed)."""
    models = {rho: lean_model(rho) for rho in np.unique(rhos[rows])}
    out = np.full(rows.size, np.nan)
    for j, i in enumerate(rows):
        try:
            p, _ = curve_fit(
                models[rhos[i]], lags, g2[i], p0=(np.log(1e-8), 0.5), sigma=sigma[i], maxfev=2000
            )
            out[j] = np.exp(p[0])
        except RuntimeError:
            pass
    return out


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    parser.add_argument("--minutes", type=float, default=30.0, help="recording length (30)")
    parser.add_argument("--subset", type=int, default=2000, help="curves for curve_fit (2000)")
    parser.add_argument("--blocks", type=int, default=8, help="timing blocks of the subset (8)")
    parser.add_argument("--repeats", type=int, default=5, help="batched-fit repeats (5)")
    parser.add_argument("--seed", type=int, default=0)
    args = parser.parse_args(argv)
    rng = np.random.default_rng(args.seed)

    g2, sigma, truth, rhos, lags = simulate(args.minutes, rng)
    n_curves = g2.shape[0]
    print(f"workload: {n_curves} curves x {lags.size} lags ({args.minutes:g} min, 20 Hz, 2 ch)")

    times, cpu = [], []
    for _ in range(args.repeats):
        start, start_cpu = time.perf_counter(), time.process_time()
        result = fit_g2(g2, lags, separation_cm=rhos, weighting=sigma)
        times.append(time.perf_counter() - start)
        cpu.append(time.process_time() - start_cpu)
    batched_s = statistics.median(times)
    batched_cpu = statistics.median(cpu)
    print(
        f"batched fit_g2: median wall {batched_s:.2f} s, CPU {batched_cpu:.2f} s over "
        f"{args.repeats} runs (wall {', '.join(f'{t:.2f}' for t in times)}); "
        f"{batched_s / n_curves * 1e6:.1f} us/curve wall; "
        f"median iterations {np.median(result.n_iter):.0f}; "
        f"converged {result.converged.mean():.4f}; fitted {result.fitted.mean():.4f}"
    )

    rows = np.sort(rng.choice(n_curves, size=min(args.subset, n_curves), replace=False))
    per_curve, per_curve_cpu, ref = [], [], []
    for block in np.array_split(rows, args.blocks):
        start, start_cpu = time.perf_counter(), time.process_time()
        ref.append(curve_fit_loop(g2, sigma, rhos, lags, block))
        per_curve.append((time.perf_counter() - start) / block.size)
        per_curve_cpu.append((time.process_time() - start_cpu) / block.size)
    ref = np.concatenate(ref)
    per_curve_s = statistics.median(per_curve)
    loop_s = per_curve_s * n_curves
    loop_cpu = statistics.median(per_curve_cpu) * n_curves
    print(
        f"curve_fit loop: timed on {rows.size} random curves in {args.blocks} blocks, median "
        f"{per_curve_s * 1e3:.2f} ms/curve wall ({loop_cpu / n_curves * 1e3:.2f} ms CPU), "
        f"EXTRAPOLATED to {n_curves} curves: {loop_s:.0f} s wall, {loop_cpu:.0f} s CPU"
    )
    print(
        f"speed-up (curve_fit loop / batched), medians: {loop_s / batched_s:.0f}x wall-clock, "
        f"{loop_cpu / batched_cpu:.0f}x CPU time (the machine may be shared: CPU time is "
        "the steadier figure)"
    )
    best_ratio = min(per_curve) * n_curves / min(times)
    best_cpu = min(per_curve_cpu) * n_curves / min(cpu)
    print(
        f"best-of-repeats (fastest batched run vs fastest curve_fit block; an indication of "
        f"an unloaded machine): wall {min(times):.2f} s vs {min(per_curve) * n_curves:.0f} s, "
        f"{best_ratio:.0f}x; CPU {min(cpu):.2f} s vs {min(per_curve_cpu) * n_curves:.0f} s, "
        f"{best_cpu:.0f}x"
    )

    ours = result.bfi_cm2_s[rows]
    both = np.isfinite(ours) & np.isfinite(ref)
    err_ours = np.median(np.abs(ours[both] / truth[rows][both] - 1))
    err_ref = np.median(np.abs(ref[both] / truth[rows][both] - 1))
    diff = np.abs(ours[both] / ref[both] - 1)
    print(
        f"accuracy on the subset: median |BFi error| batched {err_ours:.4f}, curve_fit "
        f"{err_ref:.4f}; batched vs curve_fit per curve: median {np.median(diff):.2e}, "
        f"99th pct {np.percentile(diff, 99):.2e}, max {diff.max():.2e}; "
        f"curve_fit failures {np.sum(~np.isfinite(ref))}, batched unfitted "
        f"{np.sum(~np.isfinite(ours))}"
    )
    for rho in (1.0, 3.0):
        sel = rhos == rho
        e = np.abs(result.bfi_cm2_s[sel] / truth[sel] - 1)
        print(f"  all curves at {rho:.1f} cm: median |BFi error| {np.nanmedian(e):.4f}")

    tracemalloc.start()
    fit_g2(g2, lags, separation_cm=rhos, weighting=sigma)
    _, peak = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    inputs_mb = (g2.nbytes + sigma.nbytes) / 1e6
    rss_kb = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
    print(
        f"memory: peak traced allocation during one batched fit {peak / 1e6:.0f} MB "
        f"(inputs g2 + sigma {inputs_mb:.0f} MB, held by the caller); "
        f"process peak RSS {rss_kb / 1e3:.0f} MB"
    )
    return 0


if __name__ == "__main__":
    sys.exit(main())
