"""Design: response functions, block/event and nuisance regressors, design matrices."""

from fstats.design.build import build_design
from fstats.design.cardiac import Heartbeats, cardiac_phase, detect_heartbeats, retroicor_terms
from fstats.design.checks import task_column_names
from fstats.design.contrasts import expand_contrasts
from fstats.design.diagnostics import DesignImage, collinearity_report, design_image, design_table
from fstats.design.drift import dct_drift, polynomial_drift
from fstats.design.loader import load_design, parse_design
from fstats.design.matrix import REGRESSOR_KINDS, Contrast, DesignMatrix
from fstats.design.response import (
    FLOW_PEAK_S,
    RESPONSE_MODELS,
    canonical_hrf,
    gamma_variate,
    glover_hrf,
    response_kernel,
)
from fstats.design.spec import DesignSpec
from fstats.design.timing import cycle_events, design_events

__all__ = [
    "REGRESSOR_KINDS",
    "Contrast",
    "DesignMatrix",
    "DesignSpec",
    "load_design",
    "parse_design",
    "build_design",
    "design_events",
    "cycle_events",
    "task_column_names",
    "expand_contrasts",
    "RESPONSE_MODELS",
    "FLOW_PEAK_S",
    "glover_hrf",
    "canonical_hrf",
    "gamma_variate",
    "response_kernel",
    "dct_drift",
    "polynomial_drift",
    "detect_heartbeats",
    "cardiac_phase",
    "retroicor_terms",
    "Heartbeats",
    "collinearity_report",
    "design_table",
    "design_image",
    "DesignImage",
]
