"""Inputs: flow tables, channel sidecars, task timing, SNIRF and cohort folders -> data objects."""

from fstats.inputs.recording import (
    FLOW_UNITS,
    SHORT_SEPARATION_THRESHOLD_CM,
    AuxSignal,
    Channel,
    Recording,
    TaskTiming,
)

__all__ = [
    "FLOW_UNITS",
    "SHORT_SEPARATION_THRESHOLD_CM",
    "AuxSignal",
    "Channel",
    "Recording",
    "TaskTiming",
]
