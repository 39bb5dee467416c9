"""Plain data objects for one DCS recording and its task timing.

These frozen dataclasses are what the readers in :mod:`fstats.inputs` return and
what every later stage (flow, design, fit, group, report) consumes.  They hold
data only; they read no files and compute nothing beyond cheap derived views.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

__all__ = [
    "SHORT_SEPARATION_THRESHOLD_CM",
    "FLOW_UNITS",
    "Channel",
    "TaskTiming",
    "AuxSignal",
    "Recording",
]

#: Channels with a source-detector separation at or below this value (cm) are
#: treated as short-separation (scalp) channels unless the user says otherwise.
#: DCS scalp channels sit at 0.5-1.5 cm, brain-sensitive ones at 2.5-4 cm
#: (common practice); 1.5 cm keeps the gap between the two groups.
SHORT_SEPARATION_THRESHOLD_CM: float = 1.5

#: Units a flow series may carry: absolute blood-flow index, or flow relative to
#: a baseline (unitless, baseline = 1).
FLOW_UNITS: tuple[str, ...] = ("cm2/s", "relative")


@dataclass(frozen=True, eq=False)
class Channel:
    """One detector channel.

    Parameters
    ----------
    name : str
        Channel name as in the flow table header or SNIRF measurement list.
    separation_cm : float
        Source-detector separation in cm.
    is_short : bool
        True for a short-separation (scalp-only) channel.
    wavelength_nm : float, optional
        Laser wavelength in nm, where known.
    """

    name: str
    separation_cm: float
    is_short: bool
    wavelength_nm: float | None = None


@dataclass(frozen=True, eq=False)
class TaskTiming:
    """Task events: one entry per block or event, in the order of onset.

    Parameters
    ----------
    onsets_s : ndarray, shape (n_events,)
        Event starts in seconds on the recording's time base.
    durations_s : ndarray, shape (n_events,)
        Event lengths in seconds (0 for an impulse event).
    conditions : tuple of str, length n_events
        Condition (BIDS ``trial_type``) of each event.
    amplitudes : ndarray, shape (n_events,)
        Per-event amplitude or parametric modulator (1.0 when not given).
    source : str
        Where the events came from (file path, ``"snirf:/nirs/stim1"``, or ``"design"``).
    """

    onsets_s: np.ndarray
    durations_s: np.ndarray
    conditions: tuple[str, ...]
    amplitudes: np.ndarray
    source: str = ""

    @property
    def condition_names(self) -> tuple[str, ...]:
        """Distinct condition names in order of first appearance."""
        return tuple(dict.fromkeys(self.conditions))

    def select(self, condition: str) -> TaskTiming:
        """The events of one condition."""
        keep = np.array([c == condition for c in self.conditions], dtype=bool)
        return TaskTiming(
            onsets_s=self.onsets_s[keep],
            durations_s=self.durations_s[keep],
            conditions=tuple(c for c, k in zip(self.conditions, keep, strict=True) if k),
            amplitudes=self.amplitudes[keep],
            source=self.source,
        )

    def __len__(self) -> int:
        return int(self.onsets_s.size)


@dataclass(frozen=True, eq=False)
class AuxSignal:
    """An auxiliary signal recorded beside the flow (PPG, accelerometer, ...).

    Parameters
    ----------
    name : str
        Signal name (``"ppg"``, ``"accel_x"``, ...).
    times_s : ndarray, shape (n_samples,)
        Sample times in seconds (may differ from the flow time base).
    values : ndarray, shape (n_samples,)
        Signal values in ``unit``.
    unit : str
        Unit of the values (``"a.u."`` when unknown).
    """

    name: str
    times_s: np.ndarray
    values: np.ndarray
    unit: str = "a.u."

    def on(self, times_s: np.ndarray) -> np.ndarray:
        """The signal linearly interpolated to other sample times (s)."""
        return np.interp(times_s, self.times_s, self.values)


@dataclass(frozen=True, eq=False)
class Recording:
    """One DCS recording: flow per channel on a regular time base.

    Parameters
    ----------
    times_s : ndarray, shape (n_times,)
        Sample times in seconds, strictly increasing and evenly spaced.
    flow : ndarray, shape (n_times, n_channels)
        Flow per channel: BFi in cm²/s when ``flow_unit == "cm2/s"``, or relative
        flow (baseline 1) when ``flow_unit == "relative"``.  NaN marks missing samples.
    channels : tuple of Channel, length n_channels
        Channel descriptions, in column order of ``flow``.
    flow_unit : {"cm2/s", "relative"}
        Unit of ``flow``.
    events : TaskTiming or None
        Task timing, if it came with the recording.
    aux : dict of str to AuxSignal
        Auxiliary signals by name.
    g2 : ndarray, shape (n_times, n_channels, n_lags), optional
        Raw intensity autocorrelation curves, if recorded.
    lags_s : ndarray, shape (n_lags,), optional
        Correlation lag times of ``g2`` in seconds.
    count_rate_hz : ndarray, shape (n_times, n_channels), optional
        Detector photon count rate in counts per second, if recorded.
    source : str
        File the recording was read from.
    subject : str, optional
        Participant id (``"sub-01"``), where known.
    session : str, optional
        Session or run label, where known.
    provenance : dict
        What was repaired or derived on the way in (for the report's footer).
    """

    times_s: np.ndarray
    flow: np.ndarray
    channels: tuple[Channel, ...]
    flow_unit: str = "cm2/s"
    events: TaskTiming | None = None
    aux: dict[str, AuxSignal] = field(default_factory=dict)
    g2: np.ndarray | None = None
    lags_s: np.ndarray | None = None
    count_rate_hz: np.ndarray | None = None
    source: str = ""
    subject: str | None = None
    session: str | None = None
    provenance: dict = field(default_factory=dict)

    @property
    def n_times(self) -> int:
        """Number of samples."""
        return int(self.times_s.size)

    @property
    def sfreq_hz(self) -> float:
        """Sampling rate in Hz (from the median time step)."""
        return float(1.0 / np.median(np.diff(self.times_s)))

    @property
    def duration_s(self) -> float:
        """Time from first sample to one step past the last, in seconds."""
        return float(self.times_s[-1] - self.times_s[0] + 1.0 / self.sfreq_hz)

    @property
    def channel_names(self) -> tuple[str, ...]:
        """Channel names in column order."""
        return tuple(c.name for c in self.channels)

    @property
    def short_channels(self) -> tuple[str, ...]:
        """Names of the short-separation channels."""
        return tuple(c.name for c in self.channels if c.is_short)

    @property
    def long_channels(self) -> tuple[str, ...]:
        """Names of the brain-sensitive (long-separation) channels."""
        return tuple(c.name for c in self.channels if not c.is_short)

    def channel_index(self, name: str) -> int:
        """Column index of a channel; raises ``KeyError`` for an unknown name."""
        for i, c in enumerate(self.channels):
            if c.name == name:
                return i
        raise KeyError(name)

    def channel_flow(self, name: str) -> np.ndarray:
        """Flow of one channel, shape (n_times,)."""
        return self.flow[:, self.channel_index(name)]
