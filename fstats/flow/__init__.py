"""Flow stage: g2 curves -> BFi, quality masks, motion handling, relative flow."""

from fstats.flow.cleaning import MOTION_CHOICES, clean_flow, relative_flow
from fstats.flow.fitting import WEIGHTINGS, G2FitResult, fit_g2
from fstats.flow.forward import (
    ADULT_HEAD_DEFAULTS,
    OBSERVABLES,
    effective_reflection,
    g1_from_g2,
    g1_semi_infinite,
    g2_from_g1,
)
from fstats.flow.g2_to_flow import flow_from_g2
from fstats.flow.motion import MOTION_METHODS, correct_motion, detect_motion, mask_segments
from fstats.flow.noise import g2_noise_sd, multi_tau_lags
from fstats.flow.screening import BLOCKING_REASONS, QUALITY_REASONS
from fstats.flow.series import fill_short_gaps, lowpass, relative_flow_values, resample
from fstats.flow.solver import BETA_MAX

__all__ = [
    "ADULT_HEAD_DEFAULTS",
    "BETA_MAX",
    "BLOCKING_REASONS",
    "MOTION_CHOICES",
    "MOTION_METHODS",
    "OBSERVABLES",
    "QUALITY_REASONS",
    "WEIGHTINGS",
    "G2FitResult",
    "clean_flow",
    "correct_motion",
    "detect_motion",
    "effective_reflection",
    "fill_short_gaps",
    "fit_g2",
    "flow_from_g2",
    "g1_from_g2",
    "g1_semi_infinite",
    "g2_from_g1",
    "g2_noise_sd",
    "lowpass",
    "mask_segments",
    "multi_tau_lags",
    "relative_flow",
    "relative_flow_values",
    "resample",
]
