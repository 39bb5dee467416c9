"""Settings of the simulated DCS recordings: the demo scenario and the calibration knobs.

The demo scenario is our own: adults do serial-subtraction mental arithmetic in
blocks (20 s rest, 40 s ``subtract``, 25 s ``recover``, repeated) while a DCS
probe records one scalp channel (1.0 cm) and two brain-sensitive channels
(3.0 cm), one over the activated frontal area and one over a control area.  An
event-design variant replaces the blocks by brief ``cue`` events with jittered
intervals.

:class:`SimulationSettings` holds every knob the calibration benchmarks need;
its defaults are the demo scenario.  Settings describe *how* to simulate and are
never changed by a simulation; per-subject physiology (heart rate, brain
fraction of the long channels, ...) is drawn from the ranges given here with the
generator passed to :func:`fstats.simulate.simulate_recording`, unless a fixed
value is given.
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass

from fstats.errors import InputError, suggest

__all__ = [
    "DESIGN_KINDS",
    "TASK_LABELS",
    "CHANNEL_LAYOUT",
    "SimulationSettings",
    "settings_to_dict",
]

#: Task designs the simulator can produce.
DESIGN_KINDS: tuple[str, ...] = ("block", "event")

#: Task label (BIDS ``task-<label>`` in file names) of each design kind.
TASK_LABELS: dict[str, str] = {"block": "subtract", "event": "cue"}

#: Channels of the simulated probe: name -> (separation_cm, role).
CHANNEL_LAYOUT: dict[str, tuple[float, str]] = {
    "scalp": (1.0, "short"),
    "frontal_a": (3.0, "long"),
    "frontal_b": (3.0, "long"),
}


#: Settings that are (low, high) ranges of positive numbers.
_RANGE_FIELDS: tuple[str, ...] = (
    "cue_interval_s",
    "heart_rate_range_bpm",
    "resp_rate_range_hz",
    "mayer_range_hz",
    "brain_fraction_range",
    "systemic_lag_range_s",
    "count_rate_short_kcps",
    "count_rate_long_kcps",
    "beta_range",
)


def _range(value, name: str) -> tuple[float, float]:
    low, high = (float(v) for v in value)
    if not (math.isfinite(low) and math.isfinite(high) and low <= high):
        raise InputError(
            "SimulationSettings", f"field {name!r}", "a (low, high) pair with low <= high", value
        )
    return low, high


@dataclass(frozen=True, kw_only=True)
class SimulationSettings:
    """How to simulate one DCS recording (keyword-only; defaults = demo scenario).

    Timing and task
    ---------------
    design : {"block", "event"}, default="block"
        Block design (conditions ``subtract`` and ``recover``) or event design
        (condition ``cue``).
    duration_s : float, default=900.0
        Recording length in seconds.
    sfreq_hz : float, default=20.0
        Flow sampling rate in Hz (10-50 Hz is typical of DCS).
    rest_s, subtract_s, recover_s : float, default=20.0, 40.0, 25.0
        Block cycle: rest, then ``subtract``, then ``recover``; repeated while a
        whole cycle plus a final rest fits into the recording.
    cue_duration_s : float, default=1.0
        Length of each ``cue`` event (event design).
    cue_interval_s : (float, float), default=(12.0, 20.0)
        Range of the onset-to-onset interval between cues, drawn uniformly.
    effect_pct : float, default=15.0
        Cerebral flow increase under ``frontal_a`` during ``subtract`` (or per unit of
        the ``cue`` regressor), in percent of the brain's baseline flow, at the plateau
        of a long block.  0 gives a null recording.
    control_effect_pct : float, default=0.0
        The same for ``frontal_b`` (control area).
    recover_effect_pct : float, default=0.0
        Cerebral flow change during ``recover`` under ``frontal_a``, in percent.
    block_amplitude_cv : float, default=0.15
        Coefficient of variation of the response amplitude from block to block.
    response_peak_s : float, default=4.5
        Peak time of the cerebral flow response kernel to a brief stimulus, in s.
    response_peak_jitter_s : float, default=0.5
        Standard deviation of the per-recording peak time, in s.
    scalp_task_pct : float, default=5.0
        Task-locked systemic (scalp) flow change, in percent of scalp baseline, in
        recordings that have one.
    scalp_task_fraction : float, default=0.5
        Probability that a recording has the task-locked scalp change.
    scalp_task_delay_s : float, default=2.0
        Extra delay of the scalp response relative to the cerebral one, in s.
    task_heart_rate_bpm : float, default=3.0
        Task-locked heart-rate increase (bpm, at the plateau) in recordings with the
        scalp change: mental arithmetic raises arousal (recalled from memory).

    Physiology
    ----------
    heart_rate_bpm : float, optional
        Mean heart rate; drawn from ``heart_rate_range_bpm`` when None.
    heart_rate_range_bpm : (float, float), default=(55.0, 90.0)
    resp_rate_hz : float, optional
        Mean respiration rate; drawn from ``resp_rate_range_hz`` when None.
    resp_rate_range_hz : (float, float), default=(0.15, 0.35)
    mayer_range_hz : (float, float), default=(0.08, 0.12)
        Centre frequency range of the Mayer waves.
    cardiac_scalp_pct, cardiac_brain_pct : float, default=20.0, 8.0
        Peak-to-peak pulsatile flow amplitude in scalp and brain, percent of baseline.
    brain_fraction : float, optional
        Weight of the brain compartment in the long channels' relative flow; drawn from
        ``brain_fraction_range`` when None (each long channel then deviates by ±0.05).
    brain_fraction_range : (float, float), default=(0.4, 0.7)
    short_brain_fraction : float, default=0.05
        Weight of the brain compartment in the short (scalp) channel.
    brain_bfi_cm2_s, scalp_bfi_cm2_s : float, default=1.0e-8, 0.6e-8
        Median baseline BFi of brain and scalp, cm²/s; each recording draws
        log-normally around them (log-sd ``bfi_log_sd``).
    bfi_log_sd : float, default=0.25
    systemic_lag_range_s : (float, float), default=(1.0, 4.0)
        Range of the lag of slow systemic signals (Mayer waves, low-frequency
        oscillations) in the brain relative to the scalp, in s.
    systemic_scale : float, default=1.0
        Multiplies every physiological nuisance (cardiac, respiration, Mayer, drift,
        systemic low-frequency signals); 0 switches them all off.
    slow_amplitude_pct : float, default=3.0
        Standard deviation of the spontaneous cerebral flow fluctuations, percent
        (each recording draws 0.7-1.3 times this).
    slow_exponent : float, default=1.0
        Spectral exponent β of those fluctuations (power ∝ 1/f^β).
    slow_min_hz : float, default=0.002
        Below this frequency their spectrum flattens.
    slow_shared_fraction : float, default=0.5
        Share of their variance common to both brain channels.

    Measurement
    -----------
    noise_pct : float, default=4.0
        Relative BFi noise per sample (percent, standard deviation) at 20 kcps and
        20 Hz; scales as ``(20 kcps / count rate)**count_rate_exponent * sqrt(sfreq/20)``.
        0 switches measurement noise off.
    count_rate_exponent : float, default=1.0
    outlier_fraction : float, default=0.001
        Fraction of samples per channel replaced by a wild value (BFi × a log-normal
        factor, log-sd 0.5), as from a failed g2 fit.
    count_rate_short_kcps, count_rate_long_kcps : (float, float), default=(50, 200), (10, 40)
        Ranges of the mean photon count rate, kilocounts per second.
    with_motion : bool, default=True
        Add 0..``max_motion_events`` sparse motion artefacts hitting all channels.
    max_motion_events : int, default=3
    with_aux : bool, default=True
        Add auxiliary signals: ``ppg`` (pulse oximeter), ``resp`` (belt) and, when
        ``with_motion``, ``accel_x``, ``accel_y``, ``accel_z`` (g).
    with_g2 : bool, default=False
        Also simulate raw g2 curves (memory: n_times × 3 × n_lags floats).
    n_lags : int, default=100
    first_lag_s : float, default=1e-7
        First correlator lag (and first-level bin width), s.
    lags_per_level : int, default=7
        Multi-tau layout: lags per level, bin width doubling per level (100 lags from
        0.1 µs reach ~10 ms).
    beta_range : (float, float), default=(0.45, 0.52)
        Range of the coherence factor β per channel.
    mua_per_cm, musp_per_cm : float, default=0.1, 10.0
        Optical properties used by the g2 forward model.
    """

    design: str = "block"
    duration_s: float = 900.0
    sfreq_hz: float = 20.0
    rest_s: float = 20.0
    subtract_s: float = 40.0
    recover_s: float = 25.0
    cue_duration_s: float = 1.0
    cue_interval_s: tuple[float, float] = (12.0, 20.0)
    effect_pct: float = 15.0
    control_effect_pct: float = 0.0
    recover_effect_pct: float = 0.0
    block_amplitude_cv: float = 0.15
    response_peak_s: float = 4.5
    response_peak_jitter_s: float = 0.5
    scalp_task_pct: float = 5.0
    scalp_task_fraction: float = 0.5
    scalp_task_delay_s: float = 2.0
    task_heart_rate_bpm: float = 3.0

    heart_rate_bpm: float | None = None
    heart_rate_range_bpm: tuple[float, float] = (55.0, 90.0)
    resp_rate_hz: float | None = None
    resp_rate_range_hz: tuple[float, float] = (0.15, 0.35)
    mayer_range_hz: tuple[float, float] = (0.08, 0.12)
    cardiac_scalp_pct: float = 20.0
    cardiac_brain_pct: float = 8.0
    brain_fraction: float | None = None
    brain_fraction_range: tuple[float, float] = (0.4, 0.7)
    short_brain_fraction: float = 0.05
    brain_bfi_cm2_s: float = 1.0e-8
    scalp_bfi_cm2_s: float = 0.6e-8
    bfi_log_sd: float = 0.25
    systemic_lag_range_s: tuple[float, float] = (1.0, 4.0)
    systemic_scale: float = 1.0
    slow_amplitude_pct: float = 3.0
    slow_exponent: float = 1.0
    slow_min_hz: float = 0.002
    slow_shared_fraction: float = 0.5

    noise_pct: float = 4.0
    count_rate_exponent: float = 1.0
    outlier_fraction: float = 0.001
    count_rate_short_kcps: tuple[float, float] = (50.0, 200.0)
    count_rate_long_kcps: tuple[float, float] = (10.0, 40.0)
    with_motion: bool = True
    max_motion_events: int = 3
    with_aux: bool = True
    with_g2: bool = False
    n_lags: int = 100
    first_lag_s: float = 1e-7
    lags_per_level: int = 7
    beta_range: tuple[float, float] = (0.45, 0.52)
    mua_per_cm: float = 0.1
    musp_per_cm: float = 10.0

    def __post_init__(self) -> None:
        if self.design not in DESIGN_KINDS:
            raise InputError(
                "SimulationSettings",
                "field 'design'",
                f"one of {', '.join(DESIGN_KINDS)}",
                self.design,
                hint=suggest(self.design, DESIGN_KINDS),
            )
        positive = (
            "duration_s",
            "sfreq_hz",
            "subtract_s",
            "cue_duration_s",
            "response_peak_s",
            "first_lag_s",
        )
        for name in positive:
            value = getattr(self, name)
            if not (math.isfinite(value) and value > 0):
                raise InputError("SimulationSettings", f"field {name!r}", "a number > 0", value)
        non_negative = (
            "rest_s",
            "recover_s",
            "block_amplitude_cv",
            "response_peak_jitter_s",
            "scalp_task_delay_s",
            "cardiac_scalp_pct",
            "cardiac_brain_pct",
            "bfi_log_sd",
            "systemic_scale",
            "slow_amplitude_pct",
            "slow_exponent",
            "slow_min_hz",
            "noise_pct",
            "count_rate_exponent",
        )
        for name in non_negative:
            value = getattr(self, name)
            if not (math.isfinite(value) and value >= 0):
                raise InputError("SimulationSettings", f"field {name!r}", "a number >= 0", value)
        fractions = (
            "scalp_task_fraction",
            "short_brain_fraction",
            "slow_shared_fraction",
            "outlier_fraction",
        )
        for name in fractions:
            value = getattr(self, name)
            if not 0.0 <= value <= 1.0:
                raise InputError(
                    "SimulationSettings", f"field {name!r}", "a number in [0, 1]", value
                )
        for name in _RANGE_FIELDS:
            low, _ = _range(getattr(self, name), name)
            if low <= 0:
                raise InputError(
                    "SimulationSettings",
                    f"field {name!r}",
                    "a range of positive numbers",
                    getattr(self, name),
                )
        if self.brain_fraction is not None and not 0.0 < self.brain_fraction <= 1.0:
            raise InputError(
                "SimulationSettings",
                "field 'brain_fraction'",
                "a number in (0, 1]",
                self.brain_fraction,
            )
        if self.sfreq_hz < 2.0 * 3.0:
            raise InputError(
                "SimulationSettings",
                "field 'sfreq_hz'",
                "a rate of at least 6 Hz (cardiac harmonics up to 3 Hz)",
                self.sfreq_hz,
            )
        if self.max_motion_events < 0 or self.n_lags < 2 or self.lags_per_level < 1:
            raise InputError(
                "SimulationSettings",
                "field 'max_motion_events' or 'n_lags'",
                "max_motion_events >= 0 and n_lags >= 2",
                (self.max_motion_events, self.n_lags),
            )

    @property
    def task_label(self) -> str:
        """BIDS task label of the design (``"subtract"`` or ``"cue"``)."""
        return TASK_LABELS[self.design]


def settings_to_dict(settings: SimulationSettings) -> dict:
    """The settings as a JSON-ready dict (tuples become lists)."""
    return {key: list(v) if isinstance(v, tuple) else v for key, v in asdict(settings).items()}
