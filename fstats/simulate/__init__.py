"""Simulated DCS recordings and cohorts with ground truth (demo, tests, calibration).

The scenario is our own: serial-subtraction mental arithmetic in blocks (20 s rest,
40 s ``subtract``, 25 s ``recover``), two groups of adults (``younger``, ``older``), a
scalp channel (1.0 cm) and two brain-sensitive channels (3.0 cm) over an activated
and a control area.  See :mod:`fstats.simulate.recording` for the signal model.
"""

from fstats.simulate.cohort import COHORT_FORMATS, GROUPS, SCENARIO, simulate_cohort
from fstats.simulate.recording import SimulatedRecording, simulate_recording
from fstats.simulate.settings import (
    CHANNEL_LAYOUT,
    DESIGN_KINDS,
    TASK_LABELS,
    SimulationSettings,
    settings_to_dict,
)

__all__ = [
    "COHORT_FORMATS",
    "GROUPS",
    "SCENARIO",
    "simulate_cohort",
    "CHANNEL_LAYOUT",
    "DESIGN_KINDS",
    "TASK_LABELS",
    "SimulatedRecording",
    "SimulationSettings",
    "settings_to_dict",
    "simulate_recording",
]
