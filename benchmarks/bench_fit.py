"""Benchmark: subject GLM of one 30-minute, 20 Hz channel against statsmodels GLSAR.

The recording is simulated (``fstats.simulate``, 1800 s at 20 Hz, 36 000 samples) and
the design is ``designs/subtract_blocks.yaml`` (task, drift, short-channel and cardiac
columns, about 20 regressors).  Timed, in the same run, median of repeats:

1. fstats default fit (AR-IRLS: BIC order search up to 80, robust IRLS, spectral
   covariance) of channel ``frontal_a``;
2. fstats ``method="ar"`` with the AR order fixed to the one the default fit chose and
   statsmodels' Yule-Walker normalisation (``ar_estimator="adjusted"``, model covariance),
   the like-for-like twin of GLSAR;
3. ``statsmodels.regression.linear_model.GLSAR(y, X, rho=p).iterative_fit(maxiter=10)``
   with the same order p.

Printed: the timings, the ratios GLSAR / fstats, and how far the estimates are apart
(fixed-order twin: maximum relative difference of all coefficients; default fit: the
task coefficient relative to GLSAR's, which differs by design because of the robust
weights).  BLAS threads are pinned to 1 for both sides (shared machines).

Usage::

    python benchmarks/bench_fit.py [--repeats 5] [--duration-s 1800]
"""

from __future__ import annotations

import os

os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")
os.environ.setdefault("OMP_NUM_THREADS", "1")

import argparse  # noqa: E402
import statistics  # noqa: E402
import time  # noqa: E402
import warnings  # noqa: E402
from pathlib import Path  # noqa: E402

import numpy as np  # noqa: E402
from statsmodels.regression.linear_model import GLSAR  # noqa: E402

from fstats.design import build_design, load_design  # noqa: E402
from fstats.fit import SubjectGLM, estimate_channel  # noqa: E402
from fstats.simulate import SimulationSettings, simulate_recording  # noqa: E402

DESIGN = Path(__file__).resolve().parents[1] / "designs" / "subtract_blocks.yaml"


def _median_time(func, repeats: int) -> tuple[float, object]:
    times, out = [], None
    for _ in range(repeats):
        start = time.perf_counter()
        out = func()
        times.append(time.perf_counter() - start)
    return statistics.median(times), out


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeats", type=int, default=5)
    parser.add_argument("--duration-s", type=float, default=1800.0)
    parser.add_argument("--seed", type=int, default=3)
    args = parser.parse_args(argv)
    sim = simulate_recording(
        SimulationSettings(duration_s=args.duration_s), np.random.default_rng(args.seed)
    )
    recording = sim.recording
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        design = build_design(load_design(DESIGN), recording)
    y = recording.channel_flow("frontal_a")
    x = design.for_channel("frontal_a")
    print(f"{recording.n_times} samples at {recording.sfreq_hz:g} Hz, {x.shape[1]} regressors")
    glm = SubjectGLM(block_averages=False)
    t_default, fit = _median_time(
        lambda: glm.fit(recording, design, channels=["frontal_a"]), args.repeats
    )
    channel = fit.channel_fits["frontal_a"]
    order = channel.ar_order
    t_twin, twin = _median_time(
        lambda: estimate_channel(
            y,
            x,
            method="ar",
            ar_order=order,
            ar_estimator="adjusted",
            covariance="model",
            max_iter=10,
            tol=1e-5,
        ),
        args.repeats,
    )
    t_glsar, ref = _median_time(
        lambda: GLSAR(y, x, rho=order).iterative_fit(maxiter=10, rtol=1e-5), args.repeats
    )
    task = design.names.index("subtract")
    twin_diff = float(np.max(np.abs(twin.betas - ref.params) / np.abs(ref.params)))
    default_diff = float(abs(channel.betas[task] - ref.params[task]) / abs(ref.params[task]))
    print(f"AR order (BIC, max 80): {order}")
    print(f"fstats default (ar-irls) fit : {t_default * 1e3:8.1f} ms (median of {args.repeats})")
    print(f"fstats ar, fixed order twin  : {t_twin * 1e3:8.1f} ms")
    print(f"statsmodels GLSAR iterative  : {t_glsar * 1e3:8.1f} ms  ({ref.iter} iterations)")
    print(f"ratio GLSAR / fstats default : {t_glsar / t_default:6.1f}x")
    print(f"ratio GLSAR / fstats twin    : {t_glsar / t_twin:6.1f}x")
    print(f"twin vs GLSAR, max relative coefficient difference: {twin_diff:.1e}")
    print(f"default vs GLSAR, task coefficient relative difference: {default_diff:.1e}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
