"""Calibration of the group models on simulated cohorts: false-positive rate and power.

Each simulated cohort has two groups (``younger``, ``older``) and subject results tables
with the CONTRACTS §5 columns, simulated at the subject-estimate level:

    true effect_i = mean(group) + N(0, effect_sd_pct)           (between-subject variance)
    estimate_ir   = true effect_i + N(0, se_ir)                 (subject GLM noise, per run)
    se_ir         = se_median_pct * exp(N(0, se_log_sd))        (heteroscedastic SEs)

with 1 or 2 runs per subject.  The group means and between-subject sd follow the
simulator's cohort defaults (fstats.simulate.cohort.simulate_cohort: younger 15 %,
older - younger = -5 percentage points, sd 4).  ``frontal_a`` carries the effect (and,
under the alternative, the group difference); ``frontal_b`` has no effect at all.

Printed: the two-group test's false-positive rate at alpha 0.05 (with a Wilson 95 %
interval) for each model when the groups do not differ, the power when they differ by
the simulator's default, the sign-flip test's null rate, the FDR family-wise rate over
the null rows, and the median time of one GroupModel.fit against the same test through
scipy.stats.ttest_ind, measured in this run.

End to end (``--end-to-end N``): N null and N alternative cohorts are simulated to
files by ``fstats.simulate.cohort.simulate_cohort`` (the simulator's own group difference,
-5 points, and between-subject sd), read back with ``fstats.inputs``, fitted with
``SubjectGLM`` using the design's fit options, and tested with the Welch and the
DerSimonian-Laird / Knapp-Hartung two-sample models.  One cohort is one task of a
process pool (``--workers``); each cohort's seed depends only on ``--seed``, the
condition and its index, so the numbers do not depend on the worker count.

Usage:  python benchmarks/calibrate_group.py [--cohorts 500] [--n-per-group 8] [--seed 0]
        python benchmarks/calibrate_group.py --end-to-end 300 --skip-summary \\
            --duration-s 600 --sfreq-hz 10 --workers 2 --json e2e.json
"""

from __future__ import annotations

import os

os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")  # before numpy: no BLAS thread contention
os.environ.setdefault("OMP_NUM_THREADS", "1")
os.environ.setdefault("MKL_NUM_THREADS", "1")

import argparse  # noqa: E402
import dataclasses  # noqa: E402
import json  # noqa: E402
import math  # noqa: E402
import time  # noqa: E402
from dataclasses import dataclass  # noqa: E402
from pathlib import Path  # noqa: E402

import numpy as np  # noqa: E402
import pandas as pd  # noqa: E402
from scipy import stats  # noqa: E402

from fstats.group import SUBJECT_COLUMNS, GroupModel  # noqa: E402

CHANNELS = (("scalp", 1.0, True), ("frontal_a", 3.0, False), ("frontal_b", 3.0, False))
BASELINE_CM2_S = 1.5e-8

MODELS = {
    "Welch t (unweighted)": dict(kind="two-sample"),
    "pooled t (unweighted)": dict(kind="two-sample", equal_variance=True),
    "DL, separate tau2, Knapp-Hartung": dict(kind="two-sample", weighting="dersimonian-laird"),
    "REML, separate tau2, Knapp-Hartung": dict(kind="two-sample", weighting="reml"),
    "REML, shared tau2, Knapp-Hartung": dict(
        kind="two-sample", weighting="reml", equal_variance=True
    ),
    "DL, separate tau2, normal reference": dict(
        kind="two-sample", weighting="dersimonian-laird", knapp_hartung=False
    ),
    "mixed: effect ~ group (t, subjects df)": dict(kind="mixed", formula="effect ~ group"),
    "mixed: effect ~ group (normal reference)": dict(
        kind="mixed", formula="effect ~ group", mixed_reference="normal"
    ),
}


def simulate_tables(
    rng: np.random.Generator,
    *,
    n_per_group: int = 8,
    younger_pct: float = 15.0,
    group_effect_pct: float = -5.0,
    effect_sd_pct: float = 4.0,
    se_median_pct: float = 2.5,
    se_log_sd: float = 0.5,
    max_runs: int = 2,
) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Subject results tables (CONTRACTS §5 columns) and participants for one cohort."""
    rows, participants = [], []
    k = 0
    for group, shift in (("younger", 0.0), ("older", group_effect_pct)):
        for _ in range(n_per_group):
            k += 1
            pid = f"sub-{k:02d}"
            participants.append(
                {
                    "participant_id": pid,
                    "group": group,
                    "age": float(
                        rng.uniform(20, 35) if group == "younger" else rng.uniform(60, 80)
                    ),
                }
            )
            runs = int(rng.integers(1, max_runs + 1))
            true = {
                "scalp": 5.0 + rng.normal(0, 2.0),
                "frontal_a": younger_pct + shift + rng.normal(0, effect_sd_pct),
                "frontal_b": rng.normal(0, effect_sd_pct / 2),
            }
            for run in range(runs):
                for channel, sep, short in CHANNELS:
                    se = se_median_pct * math.exp(rng.normal(0, se_log_sd))
                    est = true[channel] + rng.normal(0, se)
                    rows.append(
                        {
                            "subject": pid,
                            "session": str(run + 1),
                            "channel": channel,
                            "separation_cm": sep,
                            "is_short": short,
                            "term": "subtract",
                            "term_kind": "regressor",
                            "condition": "subtract",
                            "estimate": est / 100 * BASELINE_CM2_S,
                            "se": se / 100 * BASELINE_CM2_S,
                            "estimate_pct": est,
                            "se_pct": se,
                            "stat": est / se,
                            "df": 1000.0,
                            "p": 2 * stats.norm.sf(abs(est / se)),
                            "ci_low": np.nan,
                            "ci_high": np.nan,
                            "ci_low_pct": est - 1.96 * se,
                            "ci_high_pct": est + 1.96 * se,
                            "ar_order": 2,
                            "method": "ar-irls",
                            "status": "ok",
                        }
                    )
    return pd.DataFrame(rows, columns=list(SUBJECT_COLUMNS)), pd.DataFrame(participants)


def wilson(k: int, n: int, z: float = 1.959964) -> tuple[float, float]:
    """Wilson score interval of a binomial proportion."""
    p = k / n
    centre = (p + z * z / (2 * n)) / (1 + z * z / n)
    half = z * math.sqrt(p * (1 - p) / n + z * z / (4 * n * n)) / (1 + z * z / n)
    return centre - half, centre + half


def _p(result, channel="frontal_a") -> float:
    table = result.table()
    rows = table[(table["channel"] == channel) & (table["comparison"] != "Intercept")]
    return float(rows["p"].iloc[0])


def calibrate(
    n_cohorts: int, n_per_group: int, seed: int, alpha: float = 0.05, only: str = ""
) -> dict:
    """Rejection rates per model under the null and the simulator's group difference."""
    out = {}
    for label, diff in (("null (no group difference)", 0.0), ("alternative (-5 points)", -5.0)):
        rng = np.random.default_rng(seed + (0 if diff == 0 else 1))
        cohorts = [
            simulate_tables(rng, n_per_group=n_per_group, group_effect_pct=diff)
            for _ in range(n_cohorts)
        ]
        rates = {}
        for name, options in MODELS.items():
            if only not in name:
                continue
            model = GroupModel(**options, influence=False, channels=("frontal_a",))
            p = np.array([_p(model.fit(t, part)) for t, part in cohorts])
            k = int(np.sum(p <= alpha))  # a test without a p-value counts as not rejected
            rates[name] = (k / n_cohorts, *wilson(k, n_cohorts), int(np.sum(~np.isfinite(p))))
        out[label] = rates
    return out


def null_extras(n_cohorts: int, n_per_group: int, seed: int, alpha: float = 0.05) -> dict:
    """Sign-flip null rate on frontal_b and FDR family-wise rate over null rows."""
    rng = np.random.default_rng(seed + 7)
    flips = fdr_any = 0
    for _ in range(n_cohorts):
        tables, part = simulate_tables(rng, n_per_group=n_per_group, group_effect_pct=0.0)
        one = GroupModel(
            channels=("frontal_b",),
            n_permutations=999,
            influence=False,
            seed=int(rng.integers(1 << 31)),
        ).fit(tables, part)
        flips += bool(one.table()["p_permutation"].iloc[0] <= alpha)
        two = GroupModel(kind="two-sample", influence=False, include_short=True).fit(tables, part)
        fdr_any += bool(two.table()["reject"].any())  # every row is a true null here
    return {
        "sign-flip one-sample (frontal_b, null)": flips / n_cohorts,
        "FDR: any rejection among 3 null two-group rows": fdr_any / n_cohorts,
    }


def timing(n_per_group: int, seed: int, repeats: int = 30) -> dict:
    """Median seconds of GroupModel.fit (Welch, one channel) vs scipy.stats.ttest_ind."""
    rng = np.random.default_rng(seed + 11)
    tables, part = simulate_tables(rng, n_per_group=n_per_group, max_runs=1)
    model = GroupModel(kind="two-sample", influence=False, channels=("frontal_a",))
    ours, ref = [], []
    sel = tables[tables["channel"] == "frontal_a"]
    group = sel["subject"].map(part.set_index("participant_id")["group"]).to_numpy()
    values = sel["estimate_pct"].to_numpy()
    for _ in range(repeats):
        t0 = time.perf_counter()
        model.fit(tables, part)
        ours.append(time.perf_counter() - t0)
        t0 = time.perf_counter()
        stats.ttest_ind(values[group == "older"], values[group == "younger"], equal_var=False)
        ref.append(time.perf_counter() - t0)
    return {
        "GroupModel.fit median s": float(np.median(ours)),
        "scipy ttest_ind median s": float(np.median(ref)),
        "ratio": float(np.median(ours) / np.median(ref)),
    }


DESIGN = Path(__file__).resolve().parents[1] / "designs" / "subtract_blocks.yaml"

#: End-to-end group models: (label, GroupModel options), all two-sample, older - younger.
E2E_MODELS = {
    "welch": dict(kind="two-sample"),
    "dl_knapp_hartung": dict(kind="two-sample", weighting="dersimonian-laird"),
}


@dataclass(frozen=True)
class CohortTask:
    """One end-to-end cohort: everything a worker needs (picklable, spawn-safe)."""

    index: int
    seed: int
    group_effect_pct: float
    n_per_group: int
    duration_s: float
    sfreq_hz: float
    design: str
    fit_options: tuple
    channels: tuple | None
    fmt: str = "tsv"


def cohort_seed(seed: int, condition: int, index: int) -> int:
    """Seed of cohort ``index`` of a condition (0 = null, 1 = alternative).

    Derived from ``(seed, condition, index)`` alone, so results do not depend on the
    number of workers or on the order in which cohorts finish.
    """
    return int(np.random.SeedSequence([seed, condition, index]).generate_state(1)[0])


def run_cohort(task: CohortTask) -> dict:
    """Simulate one cohort to files, read it back, fit every recording, test the groups.

    Path: ``simulate_cohort`` (flow tables in a temporary folder) -> ``read_cohort`` ->
    ``read_recording`` -> ``build_design`` -> ``SubjectGLM.fit`` -> ``GroupModel``
    two-sample tests on ``frontal_a`` 'subtract' (Welch; DerSimonian-Laird with
    Knapp-Hartung).  Returns p-values, subject SEs and within-group sds, warning counts
    and the seconds taken.
    """
    import tempfile
    import warnings

    from fstats.design import build_design, load_design
    from fstats.errors import FitWarning
    from fstats.fit.glm import SubjectGLM
    from fstats.inputs import read_cohort, read_recording
    from fstats.simulate import SimulationSettings
    from fstats.simulate.cohort import simulate_cohort

    t0 = time.perf_counter()
    spec = load_design(task.design)
    glm = SubjectGLM(**dict(task.fit_options))
    settings = dataclasses.replace(
        SimulationSettings(), duration_s=task.duration_s, sfreq_hz=task.sfreq_hz
    )
    out = {"index": task.index, "seed": task.seed, "group_effect_pct": task.group_effect_pct}
    with tempfile.TemporaryDirectory() as tmp, warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always", FitWarning)
        root = simulate_cohort(
            Path(tmp) / "cohort",
            n_per_group=task.n_per_group,
            settings=settings,
            seed=task.seed,
            fmt=task.fmt,
            group_effect_pct=task.group_effect_pct,
        )
        cohort = read_cohort(root)
        tables = []
        for entry in cohort.recordings:
            recording = read_recording(entry.path)
            fit = glm.fit(recording, build_design(spec, recording), channels=task.channels)
            tables.append(fit.table())
        tables = pd.concat(tables, ignore_index=True)
        for label, options in E2E_MODELS.items():
            res = GroupModel(
                **options, influence=False, terms=("subtract",), channels=("frontal_a",)
            ).fit(tables, cohort.participants)
            row = res.table().iloc[0]
            out[f"p_{label}"] = float(row["p"])
            out[f"n_excluded_{label}"] = int(row["n_excluded"])
            if label == "welch":
                est = res.subject_estimates
                out["se_pct"] = [float(v) for v in est["se"]]
                out["sd_within_pct"] = [
                    float(v) for v in est.groupby("group")["estimate"].std().to_numpy()
                ]
                out["difference_pct"] = float(row["estimate"])
        out["fit_warnings"] = sum(issubclass(w.category, FitWarning) for w in caught)
    out["seconds"] = time.perf_counter() - t0
    return out


def _rate(p: np.ndarray, alpha: float) -> dict:
    """Rejections k/n (a missing p-value counts as not rejected) with a Wilson 95 % interval."""
    k, n = int(np.sum(p <= alpha)), int(p.size)
    lo, hi = wilson(k, n)
    return {
        "rejections": f"{k}/{n}",
        "rate": k / n,
        "wilson_95": [round(lo, 4), round(hi, 4)],
        "missing_p": int(np.sum(~np.isfinite(p))),
    }


def summarise_end_to_end(results: list[dict], alpha: float = 0.05) -> dict:
    """Rates per condition and model, median subject se_pct and within-group sd."""
    summary: dict = {}
    for condition, diff in (("null", 0.0), ("alternative", None)):
        rows = [r for r in results if (r["group_effect_pct"] == 0.0) == (diff == 0.0)]
        if not rows:
            continue
        block = {
            "group_effect_pct": rows[0]["group_effect_pct"],
            "cohorts": len(rows),
        }
        for label in E2E_MODELS:
            block[label] = _rate(np.array([r[f"p_{label}"] for r in rows]), alpha)
            block[label]["cohorts_with_exclusions"] = int(
                sum(r[f"n_excluded_{label}"] > 0 for r in rows)
            )
        block["median_subject_se_pct"] = float(np.median([v for r in rows for v in r["se_pct"]]))
        block["median_within_group_sd_pct"] = float(
            np.median([v for r in rows for v in r["sd_within_pct"]])
        )
        block["mean_estimated_difference_pct"] = float(np.mean([r["difference_pct"] for r in rows]))
        block["fit_warnings"] = int(sum(r["fit_warnings"] for r in rows))
        block["median_s_per_cohort"] = float(np.median([r["seconds"] for r in rows]))
        summary[condition] = block
    return summary


def end_to_end(
    n_cohorts: int,
    n_per_group: int,
    seed: int,
    design: str | Path = DESIGN,
    *,
    duration_s: float = 900.0,
    sfreq_hz: float = 20.0,
    fit_options: dict | None = None,
    workers: int = 1,
    all_channels: bool = False,
    group_effect_pct: float = -5.0,
    fmt: str = "tsv",
    progress: bool = True,
) -> dict:
    """Cohorts through the real pipeline: fstats.simulate -> files -> inputs -> fit -> group.

    ``n_cohorts`` null cohorts (``group_effect_pct=0``) and as many with the simulator's
    default difference (``group_effect_pct``, -5 points) are simulated; every recording
    is fitted with the design's ``fit_options`` (updated by ``fit_options``; block
    averages off, the group test does not use them) and the two-sample tests on
    ``frontal_a`` 'subtract' (older - younger) are counted.  Only ``frontal_a`` is
    fitted unless ``all_channels`` (the scalp channel enters its design as a regressor
    either way).  One task = one cohort, seeded by :func:`cohort_seed`; ``workers > 1``
    runs them in a spawn-context process pool.

    Returns ``{"settings": ..., "summary": ..., "cohorts": [...]}`` (per-cohort records).
    """
    from multiprocessing import get_context

    from fstats.design import load_design

    spec = load_design(design)
    options = {
        **dict(getattr(spec, "fit_options", {}) or {}),
        "block_averages": False,
        **(fit_options or {}),
    }
    tasks = [
        CohortTask(
            index=i,
            seed=cohort_seed(seed, condition, i),
            group_effect_pct=diff,
            n_per_group=n_per_group,
            duration_s=duration_s,
            sfreq_hz=sfreq_hz,
            design=str(design),
            fit_options=tuple(sorted(options.items())),
            channels=None if all_channels else ("frontal_a",),
            fmt=fmt,
        )
        for condition, diff in ((0, 0.0), (1, float(group_effect_pct)))
        for i in range(n_cohorts)
    ]
    step = max(1, len(tasks) // 10)
    t0 = time.perf_counter()
    results: list[dict] = []

    def _collect(iterator) -> None:
        for r in iterator:
            results.append(r)
            if progress and (len(results) % step == 0 or len(results) == len(tasks)):
                elapsed = time.perf_counter() - t0
                eta = elapsed / len(results) * (len(tasks) - len(results))
                print(
                    f"  {len(results)}/{len(tasks)} cohorts, {elapsed:.0f} s elapsed, "
                    f"~{eta:.0f} s left",
                    flush=True,
                )

    if workers > 1:
        with get_context("spawn").Pool(workers) as pool:
            _collect(pool.imap_unordered(run_cohort, tasks))
    else:
        _collect(map(run_cohort, tasks))
    results.sort(key=lambda r: (r["group_effect_pct"] != 0.0, r["index"]))
    settings = {
        "cohorts_per_condition": n_cohorts,
        "subjects_per_group": n_per_group,
        "recording": f"{duration_s:g} s at {sfreq_hz:g} Hz",
        "design": str(design),
        "fit_options": options,
        "fitted_channels": "all" if all_channels else ["frontal_a"],
        "cohort_format": fmt,
        "test": "frontal_a 'subtract', older - younger, alpha 0.05",
        "seed": seed,
        "workers": workers,
        "wall_s": round(time.perf_counter() - t0, 1),
    }
    return {"settings": settings, "summary": summarise_end_to_end(results), "cohorts": results}


def _print_end_to_end(found: dict) -> None:
    settings, summary = found["settings"], found["summary"]
    print(
        f"  {settings['cohorts_per_condition']} null + {settings['cohorts_per_condition']} "
        f"alternative cohorts of 2 x {settings['subjects_per_group']} subjects, "
        f"{settings['recording']}, fit {settings['fit_options']}, "
        f"channels fitted: {settings['fitted_channels']}, "
        f"files {settings['cohort_format']}, workers {settings['workers']}, "
        f"wall {settings['wall_s']:.0f} s"
    )
    for condition, block in summary.items():
        print(f"  {condition} (older - younger = {block['group_effect_pct']:g} points):")
        for label in E2E_MODELS:
            r = block[label]
            lo, hi = r["wilson_95"]
            print(
                f"    {label:18s} rejections {r['rejections']:>8s} = {r['rate']:.3f} "
                f"[Wilson 95 % {lo:.3f}, {hi:.3f}]  missing p {r['missing_p']}, "
                f"cohorts with exclusions {r['cohorts_with_exclusions']}"
            )
        print(
            f"    median subject se_pct {block['median_subject_se_pct']:.3f}, median "
            f"within-group sd {block['median_within_group_sd_pct']:.3f}, mean estimated "
            f"difference {block['mean_estimated_difference_pct']:.3f}, "
            f"fit warnings {block['fit_warnings']}, "
            f"median {block['median_s_per_cohort']:.1f} s per cohort"
        )


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    parser.add_argument("--cohorts", type=int, default=500)
    parser.add_argument("--n-per-group", type=int, default=8)
    parser.add_argument("--seed", type=int, default=0)
    parser.add_argument("--only", default="", help="run only models whose label contains this")
    parser.add_argument(
        "--end-to-end",
        type=int,
        default=0,
        metavar="N",
        help="also run N null and N alternative cohorts through simulate + fit",
    )
    parser.add_argument("--design", default=str(DESIGN))
    parser.add_argument(
        "--duration-s", type=float, default=900.0, help="end-to-end: simulated recording length (s)"
    )
    parser.add_argument(
        "--sfreq-hz", type=float, default=20.0, help="end-to-end: simulated sampling rate (Hz)"
    )
    parser.add_argument(
        "--workers", type=int, default=1, help="end-to-end: worker processes (one cohort a task)"
    )
    parser.add_argument(
        "--all-channels",
        action="store_true",
        help="end-to-end: fit every channel, not only the tested frontal_a",
    )
    parser.add_argument(
        "--format",
        choices=("tsv", "snirf"),
        default="tsv",
        help="end-to-end: cohort file format written and read back (same data either way)",
    )
    parser.add_argument(
        "--json", type=Path, default=None, help="end-to-end: write settings, summary, cohorts"
    )
    parser.add_argument("--skip-summary", action="store_true", help="only the end-to-end check")
    args = parser.parse_args()
    if args.end_to_end:
        print("end-to-end (fstats.simulate -> files -> inputs -> design -> fit -> group):")
        found = end_to_end(
            args.end_to_end,
            args.n_per_group,
            args.seed,
            args.design,
            duration_s=args.duration_s,
            sfreq_hz=args.sfreq_hz,
            workers=args.workers,
            all_channels=args.all_channels,
            fmt=args.format,
        )
        _print_end_to_end(found)
        if args.json:
            args.json.write_text(json.dumps(found, indent=1) + "\n")
        if args.skip_summary:
            return
    t0 = time.perf_counter()
    rates = calibrate(args.cohorts, args.n_per_group, args.seed, only=args.only)
    print(
        f"{args.cohorts} simulated cohorts per condition, {args.n_per_group} subjects per "
        f"group, alpha 0.05, test on frontal_a 'subtract', older - younger"
    )
    for label, by_model in rates.items():
        print(f"\n{label}: rejection rate [Wilson 95 % interval]")
        for name, (rate, lo, hi, n_missing) in by_model.items():
            note = f"  ({n_missing} cohorts without a p-value)" if n_missing else ""
            print(f"  {name:40s} {rate:6.3f}  [{lo:.3f}, {hi:.3f}]{note}")
    if not args.only:
        extras = null_extras(max(300, args.cohorts // 2), args.n_per_group, args.seed)
        print()
        for name, rate in extras.items():
            print(f"{name:52s} {rate:6.3f}")
    print()
    for name, value in timing(args.n_per_group, args.seed).items():
        print(f"{name:28s} {value:.6g}")
    print(f"\ntotal {time.perf_counter() - t0:.1f} s")


if __name__ == "__main__":
    main()
