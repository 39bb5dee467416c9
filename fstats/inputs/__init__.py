"""Inputs: flow tables, channel sidecars, task timing, SNIRF and cohort folders -> data objects."""

from fstats.inputs.channels import CHANNEL_ROLES, read_channels, write_channels
from fstats.inputs.cohort import (
    Cohort,
    RecordingEntry,
    find_recordings,
    read_cohort,
    read_participants,
    read_recording,
)
from fstats.inputs.events import read_events, write_events
from fstats.inputs.recording import (
    FLOW_UNITS,
    SHORT_SEPARATION_THRESHOLD_CM,
    AuxSignal,
    Channel,
    Recording,
    TaskTiming,
)
from fstats.inputs.snirf import DCS_DATA_TYPES, read_snirf
from fstats.inputs.snirf_writer import write_snirf
from fstats.inputs.tables import read_aux, read_flow_table, write_aux, write_flow_table

__all__ = [
    "FLOW_UNITS",
    "SHORT_SEPARATION_THRESHOLD_CM",
    "AuxSignal",
    "Channel",
    "Recording",
    "TaskTiming",
    "CHANNEL_ROLES",
    "DCS_DATA_TYPES",
    "Cohort",
    "RecordingEntry",
    "find_recordings",
    "read_aux",
    "read_channels",
    "read_cohort",
    "read_events",
    "read_flow_table",
    "read_participants",
    "read_recording",
    "read_snirf",
    "write_aux",
    "write_channels",
    "write_events",
    "write_flow_table",
    "write_snirf",
]
