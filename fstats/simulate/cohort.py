"""A simulated cohort on disk: two groups of adults, one recording each, plus ground truth.

Layout (CONTRACTS §1)::

    <out_dir>/participants.tsv          participant_id, group, age, sex
    <out_dir>/ground_truth.json         what went into every recording (CONTRACTS §6)
    <out_dir>/sub-01/sub-01_task-subtract_flow.tsv   (+ _channels.tsv, _events.tsv, _aux.tsv)
                     or sub-01_task-subtract_dcs.snirf

Groups: ``younger`` (age 20-35) and ``older`` (age 60-78).  The true cerebral
effect of each subject is drawn around its group mean, ``settings.effect_pct`` for
the younger group and ``settings.effect_pct + group_effect_pct`` for the older one,
with between-subject standard deviation ``effect_sd_pct``.  Exactly
``round(scalp_task_fraction × n_subjects)`` subjects, chosen at random, get the
task-locked scalp change; its size varies ±40 % around ``scalp_task_pct``.
"""

from __future__ import annotations

import json
import logging
import shutil
import tempfile
from dataclasses import replace
from pathlib import Path

import numpy as np
import pandas as pd

from fstats.errors import InputError
from fstats.inputs import write_flow_table, write_snirf
from fstats.simulate.recording import simulate_recording
from fstats.simulate.settings import SimulationSettings, settings_to_dict

__all__ = ["COHORT_FORMATS", "GROUPS", "SCENARIO", "simulate_cohort"]

logger = logging.getLogger(__name__)

#: File formats a simulated cohort can be written in.
COHORT_FORMATS: tuple[str, ...] = ("tsv", "snirf")

#: Group labels and their age ranges (years, inclusive).
GROUPS: dict[str, tuple[int, int]] = {"younger": (20, 35), "older": (60, 78)}

#: One-line description of the scenario, written to ground_truth.json.
SCENARIO: str = (
    "serial-subtraction mental arithmetic (rest 20 s, subtract 40 s, recover 25 s), "
    "younger vs older adults, DCS scalp channel 1.0 cm and two frontal channels 3.0 cm"
)


def _check_target(out_dir: Path) -> None:
    if out_dir.exists() and not out_dir.is_dir():
        raise InputError(out_dir, "output folder", "a folder (or a new name)", "an existing file")
    if out_dir.is_dir() and any(out_dir.iterdir()) and not (out_dir / "ground_truth.json").exists():
        raise InputError(
            out_dir,
            "output folder",
            "an empty folder, a new name, or an earlier simulated cohort",
            "a folder with other files",
            hint="choose another OUT_DIR; fstats replaces only folders it simulated",
        )


def simulate_cohort(
    out_dir: str | Path,
    *,
    n_per_group: int = 8,
    settings: SimulationSettings | None = None,
    seed: int = 0,
    fmt: str = "tsv",
    group_effect_pct: float = -5.0,
    effect_sd_pct: float = 4.0,
) -> Path:
    """Simulate a two-group cohort and write it in the cohort layout (CONTRACTS §1, §6).

    Parameters
    ----------
    out_dir : str or Path
        Cohort folder to create.  An existing folder must be empty or hold an earlier
        simulated cohort (it is replaced once the new one is complete).
    n_per_group : int, default=8
        Subjects per group (``younger``, ``older``).
    settings : SimulationSettings, optional
        Recording settings (default: the demo scenario).  ``effect_pct`` is the mean
        cerebral effect of the younger group, in percent.
    seed : int, default=0
        Seed of everything random; the same seed gives the same files.
    fmt : {"tsv", "snirf"}, default="tsv"
        Flow tables with sidecars, or one SNIRF file per recording (needed for g2).
    group_effect_pct : float, default=-5.0
        Mean effect of the ``older`` group minus that of the ``younger`` group, in
        percentage points of cerebral flow.
    effect_sd_pct : float, default=4.0
        Between-subject standard deviation of the true effect, percentage points.

    Returns
    -------
    Path
        The cohort folder.

    Raises
    ------
    InputError
        For an unusable ``out_dir``, ``fmt`` or ``n_per_group``, or g2 curves with
        ``fmt="tsv"``.
    """
    settings = settings or SimulationSettings()
    out_dir = Path(out_dir)
    if fmt not in COHORT_FORMATS:
        raise InputError("simulate_cohort", "fmt", f"one of {', '.join(COHORT_FORMATS)}", fmt)
    if settings.with_g2 and fmt != "snirf":
        raise InputError(
            "simulate_cohort",
            "fmt",
            "'snirf' when g2 curves are simulated",
            fmt,
            hint="flow tables cannot hold g2 curves; use the snirf format",
        )
    if int(n_per_group) < 1:
        raise InputError("simulate_cohort", "n_per_group", "at least 1 subject", n_per_group)
    if not effect_sd_pct >= 0:
        raise InputError("simulate_cohort", "effect_sd_pct", "a number >= 0", effect_sd_pct)
    _check_target(out_dir)

    n_per_group = int(n_per_group)
    n_subjects = n_per_group * len(GROUPS)
    root = np.random.SeedSequence(seed)
    cohort_seq, *subject_seqs = root.spawn(n_subjects + 1)
    cohort_rng = np.random.default_rng(cohort_seq)
    groups = [g for g in GROUPS for _ in range(n_per_group)]
    group_means = {"younger": settings.effect_pct, "older": settings.effect_pct + group_effect_pct}
    effects = np.array(
        [group_means[g] for g in groups]
    ) + effect_sd_pct * cohort_rng.standard_normal(n_subjects)
    n_scalp = int(round(settings.scalp_task_fraction * n_subjects))
    scalp_subjects = set(cohort_rng.choice(n_subjects, size=n_scalp, replace=False).tolist())
    scalp_sizes = settings.scalp_task_pct * cohort_rng.uniform(0.6, 1.4, n_subjects)
    ages = [int(cohort_rng.integers(GROUPS[g][0], GROUPS[g][1] + 1)) for g in groups]
    sexes = cohort_rng.choice(["F", "M"], size=n_subjects).tolist()
    width = max(2, len(str(n_subjects)))

    out_dir.parent.mkdir(parents=True, exist_ok=True)
    staging = Path(tempfile.mkdtemp(prefix=f".{out_dir.name}.", dir=out_dir.parent))
    staging.chmod(0o755)
    try:
        subjects: dict[str, dict] = {}
        rows = []
        for i in range(n_subjects):
            pid = f"sub-{i + 1:0{width}d}"
            subject_settings = replace(
                settings,
                effect_pct=float(effects[i]),
                scalp_task_pct=float(scalp_sizes[i]),
                scalp_task_fraction=1.0 if i in scalp_subjects else 0.0,
            )
            simulated = simulate_recording(
                subject_settings, np.random.default_rng(subject_seqs[i]), subject=pid
            )
            stem = f"{pid}_task-{settings.task_label}"
            if fmt == "tsv":
                target = staging / pid / f"{stem}_flow.tsv"
                (staging / pid).mkdir()
                write_flow_table(simulated.recording, target)
            else:
                target = staging / pid / f"{stem}_dcs.snirf"
                write_snirf(simulated.recording, target)
            truth = {
                "group": groups[i],
                "age": ages[i],
                "sex": sexes[i],
                "recording": str(target.relative_to(staging)),
                **simulated.truth,
            }
            subjects[pid] = truth
            rows.append(
                {"participant_id": pid, "group": groups[i], "age": ages[i], "sex": sexes[i]}
            )
            logger.info("simulated %s (%s, effect %.1f %%)", pid, groups[i], effects[i])
        pd.DataFrame(rows).to_csv(staging / "participants.tsv", sep="\t", index=False, na_rep="n/a")
        ground_truth = {
            "scenario": SCENARIO
            if settings.design == "block"
            else SCENARIO.replace(
                "(rest 20 s, subtract 40 s, recover 25 s)", "(brief cue events, jittered intervals)"
            ),
            "seed": int(seed),
            "settings": settings_to_dict(settings),
            "cohort": {
                "n_per_group": n_per_group,
                "groups": list(GROUPS),
                "format": fmt,
                "group_effect_pct": float(group_effect_pct),
                "effect_sd_pct": float(effect_sd_pct),
                "group_mean_effect_pct": {g: float(v) for g, v in group_means.items()},
                "n_with_scalp_task": n_scalp,
            },
            "subjects": subjects,
        }
        (staging / "ground_truth.json").write_text(json.dumps(ground_truth, indent=2) + "\n")
        _swap_into_place(staging, out_dir)
    except BaseException:
        shutil.rmtree(staging, ignore_errors=True)
        raise
    logger.info("wrote %d simulated recordings to %s", n_subjects, out_dir)
    return out_dir


def _swap_into_place(staging: Path, out_dir: Path) -> None:
    """Rename the finished staging folder to ``out_dir``, replacing an earlier cohort."""
    if out_dir.exists():
        old = out_dir.with_name(f".{out_dir.name}.old")
        if old.exists():
            shutil.rmtree(old)
        out_dir.rename(old)
        staging.rename(out_dir)
        shutil.rmtree(old, ignore_errors=True)
    else:
        staging.rename(out_dir)
