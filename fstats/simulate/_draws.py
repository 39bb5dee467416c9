"""Per-recording physiology drawn from the ranges of the settings (private helper)."""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from fstats.simulate.settings import SimulationSettings


@dataclass(frozen=True, eq=False)
class PhysiologyDraw:
    """What one recording draws before any signal is made (units in the names)."""

    heart_rate_bpm: float
    resp_rate_hz: float
    mayer_hz: float
    brain_fraction: float  # subject-level weight of the brain in the long channels
    brain_fraction_long: np.ndarray  # (2,) per long channel
    short_fraction: float  # weight of the brain in the short channel
    brain_bfi: float  # cm²/s
    brain_bfi_long: np.ndarray  # (2,) cm²/s under each long channel
    scalp_bfi: float  # cm²/s
    systemic_lag_s: float
    cardiac_lag_s: float
    peak_s: float  # cerebral kernel peak
    has_scalp_task: bool
    amplitudes_pct: dict  # nuisance sizes, percent of baseline
    mean_count_rate_hz: np.ndarray  # (3,) counts/s
    beta: np.ndarray  # (3,) coherence factors


def _pick(value, value_range, rng) -> float:
    return float(value) if value is not None else float(rng.uniform(*value_range))


def draw_physiology(s: SimulationSettings, rng: np.random.Generator) -> PhysiologyDraw:
    """Draw one recording's physiology and instrument parameters from the settings' ranges."""
    heart_rate = _pick(s.heart_rate_bpm, s.heart_rate_range_bpm, rng)
    resp_rate = _pick(s.resp_rate_hz, s.resp_rate_range_hz, rng)
    mayer_hz = float(rng.uniform(*s.mayer_range_hz))
    if s.brain_fraction is None:
        w_subject = float(rng.uniform(*s.brain_fraction_range))
        w_long = np.clip(w_subject + rng.uniform(-0.05, 0.05, 2), 0.05, 0.95)
    else:
        w_subject = float(s.brain_fraction)
        w_long = np.full(2, w_subject)
    brain_bfi = s.brain_bfi_cm2_s * math.exp(s.bfi_log_sd * rng.standard_normal())
    brain_bfi_long = brain_bfi * np.exp(0.1 * rng.standard_normal(2))
    scalp_bfi = s.scalp_bfi_cm2_s * math.exp(s.bfi_log_sd * rng.standard_normal())
    systemic_lag = float(rng.uniform(*s.systemic_lag_range_s))
    cardiac_lag = float(rng.uniform(-0.03, 0.08))
    peak = float(
        np.clip(s.response_peak_s + s.response_peak_jitter_s * rng.standard_normal(), 2.5, 8.0)
    )
    has_scalp_task = bool(rng.random() < s.scalp_task_fraction)
    amplitudes = {  # percent of baseline; cardiac peak-to-peak, the others standard deviations
        "cardiac_scalp": s.cardiac_scalp_pct * rng.uniform(0.8, 1.2),
        "cardiac_brain": s.cardiac_brain_pct * rng.uniform(0.8, 1.2),
        "resp_scalp": rng.uniform(1.0, 3.0),
        "resp_brain": rng.uniform(0.5, 1.5),
        "mayer_scalp": rng.uniform(1.5, 3.5),
        "mayer_brain": rng.uniform(1.0, 2.5),
        "lowfreq_scalp": rng.uniform(1.5, 3.0),
        "lowfreq_brain": rng.uniform(1.0, 2.0),
        "drift_scalp": rng.uniform(1.0, 4.0),
        "drift_brain": rng.uniform(0.5, 2.0),
        "scalp_local": rng.uniform(0.5, 1.0),
    }
    short_rate = rng.uniform(*s.count_rate_short_kcps, 1)
    long_rates = rng.uniform(*s.count_rate_long_kcps, 2)
    return PhysiologyDraw(
        heart_rate_bpm=heart_rate,
        resp_rate_hz=resp_rate,
        mayer_hz=mayer_hz,
        brain_fraction=w_subject,
        brain_fraction_long=w_long,
        short_fraction=float(s.short_brain_fraction),
        brain_bfi=brain_bfi,
        brain_bfi_long=brain_bfi_long,
        scalp_bfi=scalp_bfi,
        systemic_lag_s=systemic_lag,
        cardiac_lag_s=cardiac_lag,
        peak_s=peak,
        has_scalp_task=has_scalp_task,
        amplitudes_pct=amplitudes,
        mean_count_rate_hz=np.concatenate([short_rate, long_rates]) * 1e3,
        beta=rng.uniform(*s.beta_range, 3),
    )
