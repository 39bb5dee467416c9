"""Inputs: flow tables, channel sidecars, task timing, SNIRF and cohort folders -> data objects.

Readers return the frozen dataclasses of :mod:`fstats.inputs.recording` and check their
files once, here: a bad file raises :class:`fstats.errors.InputError` naming the file and
the line/column or HDF5 field; safe repairs are logged, raised as
:class:`fstats.errors.InputRepairWarning` and listed in ``Recording.provenance["repairs"]``
(see :mod:`fstats.inputs._validate`).

=========================  ==================================================================
reader                     file
=========================  ==================================================================
``read_recording``         any recording, by suffix (``.tsv``/``.csv`` flow table, ``.snirf``)
``read_flow_table``        ``<stem>_flow.tsv|csv`` + ``_channels.tsv`` [+ ``_events.tsv``,
                           ``_aux.tsv``] (:mod:`~fstats.inputs.tables`)
``read_channels``          ``<stem>_channels.tsv`` (:mod:`~fstats.inputs.channels`)
``read_events``            BIDS ``events.tsv`` (:mod:`~fstats.inputs.events`)
``read_aux``               ``<stem>_aux.tsv``
``read_flow_mask``         ``<stem>_flowmask.tsv`` (:mod:`~fstats.inputs.masks`; read by
                           ``read_flow_table`` into ``provenance["flow"]["masks"]``)
``read_snirf``             ``<stem>_dcs.snirf``, DCS dataTypes 410/401 (:mod:`~fstats.inputs.snirf`)
``read_participants``      ``participants.tsv`` (:mod:`~fstats.inputs.cohort`)
``find_recordings``,       a cohort folder: ``participants.tsv`` + ``sub-<label>/`` folders
``read_cohort``
=========================  ==================================================================

Writers (``write_flow_table``, ``write_snirf``, ``write_channels``, ``write_events``,
``write_aux``, ``write_flow_mask``) write files the readers read back to identical arrays.
"""

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
from fstats.inputs.masks import read_flow_mask, write_flow_mask
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
    "read_flow_mask",
    "read_flow_table",
    "read_participants",
    "read_recording",
    "read_snirf",
    "write_aux",
    "write_channels",
    "write_events",
    "write_flow_mask",
    "write_flow_table",
    "write_snirf",
]
