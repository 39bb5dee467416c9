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

Usage:  python benchmarks/calibrate_group.py [--cohorts 500] [--n-per-group 8] [--seed 0]
        python benchmarks/calibrate_group.py --end-to-end 20   # also through simulate+fit
"""

from __future__ import annotations

import argparse
import math
import time

import numpy as np
import pandas as pd
from scipy import stats

from fstats.group import SUBJECT_COLUMNS, GroupModel

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


def end_to_end(
    n_cohorts: int,
    n_per_group: int,
    seed: int,
    design: str,
    *,
    duration_s: float = 900.0,
    sfreq_hz: float = 20.0,
    fit_options: dict | None = None,
) -> dict | str:
    """Cohorts through the real pipeline: fstats.simulate -> design -> fit -> group.

    ``n_cohorts`` null cohorts (``group_effect_pct=0``) and as many with the simulator's
    default difference (-5 points) are simulated; every recording is fitted with the
    design's fit options (updated by ``fit_options``) and the Welch two-group test on
    ``frontal_a`` 'subtract' is counted.  Also reported: the median subject-level
    ``se_pct`` and the sd of subject estimates within a group, i.e. the quantities the
    summary-level simulation assumes.  Returns a reason when a stage is missing.
    """
    import dataclasses
    import tempfile
    from pathlib import Path

    try:
        from fstats.design import build_design, load_design
        from fstats.fit.glm import SubjectGLM
        from fstats.inputs import read_cohort, read_recording
        from fstats.simulate import SimulationSettings
        from fstats.simulate.cohort import simulate_cohort
    except ImportError as exc:
        return f"skipped: {exc}"
    spec = load_design(design)
    options = {**dict(getattr(spec, "fit_options", {}) or {}), **(fit_options or {})}
    glm = SubjectGLM(**options)
    settings = dataclasses.replace(SimulationSettings(), duration_s=duration_s, sfreq_hz=sfreq_hz)
    p_values = {0.0: [], -5.0: []}
    ses, sds, seconds = [], [], []
    for c in range(n_cohorts):
        for diff, store in p_values.items():
            t0 = time.perf_counter()
            with tempfile.TemporaryDirectory() as tmp:
                root = simulate_cohort(
                    Path(tmp) / "cohort",
                    n_per_group=n_per_group,
                    settings=settings,
                    seed=seed + 1000 * c + int(diff == 0),
                    group_effect_pct=diff,
                )
                cohort = read_cohort(root)
                tables = []
                for entry in cohort.recordings:
                    recording = read_recording(entry.path)
                    fit = glm.fit(recording, build_design(spec, recording))
                    tables.append(fit.table())
                tables = pd.concat(tables, ignore_index=True)
                res = GroupModel(
                    kind="two-sample", influence=False, terms=("subtract",), channels=("frontal_a",)
                ).fit(tables, cohort.participants)
                store.append(float(res.table()["p"].iloc[0]))
                est = res.subject_estimates
                ses.extend(est["se"].tolist())
                sds.extend(est.groupby("group")["estimate"].std().tolist())
            seconds.append(time.perf_counter() - t0)
    null, alt = np.array(p_values[0.0]), np.array(p_values[-5.0])
    k0 = int(np.sum(null <= 0.05))
    return {
        "cohorts per condition": n_cohorts,
        "subjects per group": n_per_group,
        "recording": f"{duration_s:g} s at {sfreq_hz:g} Hz",
        "fit": options,
        "null rejections": f"{k0}/{n_cohorts}",
        "null Wilson 95 %": wilson(k0, n_cohorts),
        "power at -5 points": float(np.mean(alt <= 0.05)),
        "median subject se_pct": float(np.median(ses)),
        "median within-group sd of subject estimates": float(np.median(sds)),
        "median s per cohort": float(np.median(seconds)),
    }


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
    parser.add_argument("--design", default="designs/subtract_blocks.yaml")
    parser.add_argument(
        "--duration-s", type=float, default=900.0, help="end-to-end: simulated recording length (s)"
    )
    parser.add_argument(
        "--sfreq-hz", type=float, default=20.0, help="end-to-end: simulated sampling rate (Hz)"
    )
    parser.add_argument("--skip-summary", action="store_true", help="only the end-to-end check")
    args = parser.parse_args()
    if args.end_to_end:
        print("end-to-end (fstats.simulate -> design -> fit -> group):")
        found = end_to_end(
            args.end_to_end,
            args.n_per_group,
            args.seed,
            args.design,
            duration_s=args.duration_s,
            sfreq_hz=args.sfreq_hz,
        )
        for key, value in found.items() if isinstance(found, dict) else [("", found)]:
            print(f"  {key}: {value}")
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
