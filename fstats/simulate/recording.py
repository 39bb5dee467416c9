"""One simulated DCS recording with its ground truth.

Model (relative flow, baseline 1, per compartment)::

    scalp(t)   = 1 + S·[a_cs p(t) + a_rs r(t) + a_ms m(t) + a_ls l(t) + d_s(t)] + u(t)
    brain_k(t) = 1 + S·[a_cb p(t-δc) + a_rb r(t-δ/2) + a_mb m(t-δ) + a_lb l(t-δ) + d_b(t)]
                   + z_k(t) + e_k(t)
    long_k(t)  = w_k · brain_k(t) + (1 - w_k) · (scalp(t) + v_k(t))
    short(t)   = (1 - w_s) · scalp(t) + w_s · brain(t)

p: cardiac pulse train (beat-to-beat variability), r: respiration, m: Mayer waves
(~0.1 Hz), l: systemic low-frequency oscillation (1/f), d: slow drift, all shared
by scalp and brain, the slow ones reaching the brain δ = 1-4 s after the scalp;
S: ``systemic_scale``; u: task-locked scalp change (some recordings only);
z_k: spontaneous cerebral fluctuations with a 1/f^β spectrum down to ~0.002 Hz,
partly shared between the two brain channels; e_k: the task-evoked cerebral
response; v_k: a small scalp fluctuation local to each long channel, so that the
short channel never explains the long channels' scalp part perfectly.

Mixing.  The long channels' *relative* flow is a weighted sum of brain and scalp
relative flow with the brain weight w ("brain fraction", 0.4-0.7).  This linear
mixing of relative changes is a common first-order approximation of the
partial-volume effect of a layered head (recalled from memory; the exact weights
depend on layer thicknesses, optical properties and the change itself).  The
baseline BFi of a long channel is the same mixture of brain and scalp baselines.

Measurement.  The absolute BFi is baseline × relative flow × motion artefacts, plus
multiplicative photon-noise-like noise whose size follows the count rate
(:mod:`fstats.simulate.measurement`).  Optional g2 curves come from the
forward model at the true (noise-free, motion-affected) BFi with their own noise;
the flow column is then an independent noisy BFi, not a fit of those curves.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from fstats.inputs.recording import AuxSignal, Channel, Recording
from fstats.simulate._draws import draw_physiology
from fstats.simulate.correlation import simulate_g2
from fstats.simulate.fluctuations import band_noise, power_law_noise
from fstats.simulate.measurement import (
    accelerometer,
    count_rates,
    draw_motion_events,
    motion_factors,
    relative_noise_std,
)
from fstats.simulate.physiology import beat_times, drift, pulse_train, respiration
from fstats.simulate.settings import CHANNEL_LAYOUT, SimulationSettings
from fstats.simulate.task import (
    block_timeline,
    cerebral_kernel,
    event_timeline,
    evoked_response,
    scalp_kernel,
)

__all__ = ["SimulatedRecording", "simulate_recording", "WAVELENGTH_NM"]

#: Laser wavelength written to the simulated channels, nm (common practice for DCS).
WAVELENGTH_NM: float = 785.0

_LONG = ("frontal_a", "frontal_b")


@dataclass(frozen=True, eq=False)
class SimulatedRecording:
    """A simulated recording, what went into it, and its noise-free parts.

    Parameters
    ----------
    recording : Recording
        What a DCS instrument would have delivered (BFi in cm²/s, events, aux,
        count rates, optionally g2).
    truth : dict
        JSON-ready ground truth (effects, physiology, mixing weights, motion events);
        keys are described in ``notes/simulate.md`` and CONTRACTS §6.
    components : dict of str to ndarray
        Noise-free parts, each shape (n_times,) or (n_times, k): ``pulse``,
        ``respiration``, ``mayer``, ``scalp`` (relative scalp flow), ``scalp_systemic`` and
        ``brain_systemic`` (the shared physiological parts before ``systemic_scale``),
        ``brain`` (n, 2),
        ``slow`` (n, 2) spontaneous cerebral fluctuations, ``task`` (n, 2) cerebral
        response, ``scalp_task`` (n,), ``relative`` (n, 3) true relative flow of the
        channels before motion, ``motion`` (n, 3) motion factors, ``bfi_true`` (n, 3)
        BFi before measurement noise (cm²/s).
    """

    recording: Recording
    truth: dict
    components: dict


def simulate_recording(
    settings: SimulationSettings,
    rng: np.random.Generator,
    *,
    subject: str | None = None,
    session: str | None = None,
) -> SimulatedRecording:
    """Simulate one DCS recording of the demo scenario (flow in cm²/s at ``sfreq_hz``).

    Parameters
    ----------
    settings : SimulationSettings
        Scenario and knobs; per-recording physiology is drawn from its ranges.
    rng : numpy.random.Generator
        The only source of randomness.
    subject, session : str, optional
        Written into the recording.

    Returns
    -------
    SimulatedRecording
        ``.recording`` with channels ``scalp`` (1.0 cm, short), ``frontal_a`` and
        ``frontal_b`` (3.0 cm); ``.truth`` the ground truth; ``.components`` the
        noise-free parts.

    Notes
    -----
    See the module docstring for the model.  ``effect_pct`` is the change of the
    *brain* compartment; the long channel sees ``brain_fraction × effect_pct``
    (``truth["long_effect_pct"]``), which is what a long-channel GLM with a perfect
    short-channel correction would estimate as a percent change.
    """
    s = settings
    fs = float(s.sfreq_hz)
    n = int(round(s.duration_s * fs))
    times = np.arange(n) / fs
    sys_scale = s.systemic_scale

    # --- per-recording physiology --------------------------------------------------------
    draw = draw_physiology(s, rng)
    heart_rate, resp_rate, mayer_hz = draw.heart_rate_bpm, draw.resp_rate_hz, draw.mayer_hz
    w_subject, w_long, w_short = draw.brain_fraction, draw.brain_fraction_long, draw.short_fraction
    brain_bfi, brain_bfi_long, scalp_bfi = draw.brain_bfi, draw.brain_bfi_long, draw.scalp_bfi
    systemic_lag, cardiac_lag, peak = draw.systemic_lag_s, draw.cardiac_lag_s, draw.peak_s
    has_scalp_task, amplitudes = draw.has_scalp_task, draw.amplitudes_pct
    mean_rates, beta = draw.mean_count_rate_hz, draw.beta
    scalp_task_pct = float(s.scalp_task_pct) if has_scalp_task else 0.0

    # --- task timing and evoked responses ------------------------------------------------
    if s.design == "block":
        timing = block_timeline(
            s.duration_s, rest_s=s.rest_s, subtract_s=s.subtract_s, recover_s=s.recover_s
        )
        task_conditions = ("subtract",)
    else:
        timing = event_timeline(
            s.duration_s,
            rng,
            first_onset_s=max(s.rest_s, 10.0),
            event_duration_s=s.cue_duration_s,
            interval_s=s.cue_interval_s,
        )
        task_conditions = ("cue",)
    event_gains = np.clip(1.0 + s.block_amplitude_cv * rng.standard_normal(len(timing)), 0.0, None)
    kernel = cerebral_kernel(fs, peak)
    gains_a = {c: s.effect_pct / 100.0 for c in task_conditions}
    gains_a["recover"] = s.recover_effect_pct / 100.0
    gains_b = {c: s.control_effect_pct / 100.0 for c in task_conditions}
    task = np.column_stack(
        [
            evoked_response(times, timing, gains_a, kernel, event_gains=event_gains),
            evoked_response(times, timing, gains_b, kernel, event_gains=event_gains),
        ]
    )
    # task-locked systemic arousal: scalp flow change and heart-rate increase share one shape
    arousal = evoked_response(
        times,
        timing,
        {c: 1.0 for c in task_conditions} if has_scalp_task else {},
        scalp_kernel(fs, peak, s.scalp_task_delay_s),
        event_gains=np.clip(1.0 + 0.2 * rng.standard_normal(len(timing)), 0.0, None),
    )
    scalp_task = scalp_task_pct / 100.0 * arousal
    task_heart_rate = float(s.task_heart_rate_bpm) if has_scalp_task else 0.0

    # --- systemic signals, generated with a lead-in so the brain can lag the scalp --------
    pad = int(math.ceil(max(s.systemic_lag_range_s[1], systemic_lag, 0.1) * fs)) + 2
    n_ext = n + pad
    t_ext = (np.arange(n_ext) - pad) / fs
    resp, resp_phase = respiration(t_ext, resp_rate, rng)
    mayer = band_noise(n_ext, fs, mayer_hz, 0.012, rng)
    lowfreq = power_law_noise(n_ext, fs, 1.0, rng, min_hz=0.003, max_hz=0.08)

    def on_ext(series):
        return lambda t: np.interp(t, t_ext, series)

    beats = t_ext[0] + beat_times(
        s.duration_s + pad / fs,
        heart_rate,
        rng,
        resp_phase=lambda t: np.interp(t + t_ext[0], t_ext, resp_phase),
        mayer=lambda t: on_ext(mayer)(t + t_ext[0]),
        rate_change=lambda t: (
            task_heart_rate / heart_rate * np.interp(t + t_ext[0], times, arousal, left=0.0)
        ),
    )
    resp_at_beats = np.sin(np.interp(beats, t_ext, resp_phase))
    pulse = pulse_train(t_ext, beats, rng, amplitude_modulation=0.1 * resp_at_beats)

    def now(series):
        return series[pad:]

    def late(series, lag_s):
        return np.interp(times - lag_s, t_ext, series)

    drift_s = drift(times, rng)
    drift_b = 0.6 * drift_s + 0.4 * drift(times, rng)
    a = {k: v / 100.0 for k, v in amplitudes.items()}
    scalp_systemic = (
        a["cardiac_scalp"] * now(pulse)
        + a["resp_scalp"] * now(resp)
        + a["mayer_scalp"] * now(mayer)
        + a["lowfreq_scalp"] * now(lowfreq)
        + a["drift_scalp"] * drift_s
    )
    brain_systemic = (
        a["cardiac_brain"] * late(pulse, cardiac_lag)
        + a["resp_brain"] * late(resp, systemic_lag / 2.0)
        + a["mayer_brain"] * late(mayer, systemic_lag)
        + a["lowfreq_brain"] * late(lowfreq, systemic_lag)
        + a["drift_brain"] * drift_b
    )
    scalp = 1.0 + sys_scale * scalp_systemic + scalp_task

    # --- spontaneous cerebral fluctuations (1/f^β), partly shared ---------------------------
    rho = s.slow_shared_fraction
    slow_amp = s.slow_amplitude_pct / 100.0 * float(rng.uniform(0.7, 1.3))

    shared, local_a, local_b = power_law_noise(
        n, fs, s.slow_exponent, rng, min_hz=s.slow_min_hz, max_hz=0.5, n_series=3
    ).T
    slow = slow_amp * np.column_stack(
        [math.sqrt(rho) * shared + math.sqrt(1.0 - rho) * local for local in (local_a, local_b)]
    )
    brain = 1.0 + sys_scale * brain_systemic[:, None] + slow + task
    scalp_local = (
        sys_scale
        * a["scalp_local"]
        * power_law_noise(n, fs, 1.0, rng, min_hz=0.003, max_hz=0.5, n_series=2)
    )
    long_rel = w_long * brain + (1.0 - w_long) * (scalp[:, None] + scalp_local)
    brain_under_short = 1.0 + sys_scale * brain_systemic + slow_amp * math.sqrt(rho) * shared
    brain_under_short = brain_under_short + task.mean(axis=1)
    short_rel = (1.0 - w_short) * scalp + w_short * brain_under_short
    relative = np.maximum(np.column_stack([short_rel, long_rel]), 0.05)

    baseline = np.concatenate(
        [
            [(1.0 - w_short) * scalp_bfi + w_short * brain_bfi],
            w_long * brain_bfi_long + (1.0 - w_long) * scalp_bfi,
        ]
    )

    # --- motion, count rates, measurement noise -----------------------------------------
    motion_events = (
        draw_motion_events(s.duration_s, s.max_motion_events, rng) if s.with_motion else []
    )
    shares = np.array([[1.0, *e["long_share"]] for e in motion_events]).reshape(-1, 3)
    flow_factor, rate_factor = motion_factors(times, motion_events, shares)
    bfi_true = baseline * relative * flow_factor
    rates = count_rates(n, fs, mean_rates, rng) * rate_factor
    noise_std = relative_noise_std(rates, fs, s.noise_pct, s.count_rate_exponent)
    bfi = bfi_true * (1.0 + noise_std * rng.standard_normal(bfi_true.shape))
    # sporadic wild samples, as from a failed g2 fit (log-normal factor, sd 0.5 in log)
    wild = rng.random(bfi.shape) < s.outlier_fraction
    bfi = np.where(wild, bfi * np.exp(0.5 * rng.standard_normal(bfi.shape)), bfi)
    bfi = np.maximum(bfi, 0.02 * baseline)

    # --- optional g2 curves and auxiliary signals ----------------------------------------
    separations = np.array([CHANNEL_LAYOUT[name][0] for name in CHANNEL_LAYOUT])
    g2 = lags = None
    if s.with_g2:
        g2, lags = simulate_g2(
            bfi_true,
            rates,
            beta,
            separations,
            fs,
            rng,
            n_lags=s.n_lags,
            first_lag_s=s.first_lag_s,
            lags_per_level=s.lags_per_level,
            mua_per_cm=s.mua_per_cm,
            musp_per_cm=s.musp_per_cm,
        )
    aux: dict[str, AuxSignal] = {}
    transit = float(rng.uniform(0.15, 0.30))
    if s.with_aux:
        ppg = pulse_train(times, beats + transit, rng, kind="ppg", amplitude_cv=0.05)
        ppg = ppg / max(np.ptp(ppg), 1e-12) + 0.15 * now(resp)
        ppg = ppg + 0.02 * rng.standard_normal(n)
        ppg = ppg * np.prod(rate_factor, axis=1) ** 0.5  # motion disturbs the finger probe too
        aux["ppg"] = AuxSignal("ppg", times, ppg, "a.u.")
        aux["resp"] = AuxSignal("resp", times, now(resp) + 0.05 * rng.standard_normal(n), "a.u.")
        if s.with_motion:
            for name, values in accelerometer(times, motion_events, rng).items():
                aux[name] = AuxSignal(name, times, values, "g")

    channels = tuple(
        Channel(name, sep, role == "short", WAVELENGTH_NM)
        for name, (sep, role) in CHANNEL_LAYOUT.items()
    )
    names = tuple(CHANNEL_LAYOUT)
    recording = Recording(
        times_s=times,
        flow=bfi,
        channels=channels,
        flow_unit="cm2/s",
        events=timing,
        aux=aux,
        g2=g2,
        lags_s=lags,
        count_rate_hz=rates,
        source="simulated",
        subject=subject,
        session=session,
        provenance={"simulated": True, "scenario": s.design},
    )
    in_beats = beats[(beats >= 0) & (beats < s.duration_s)]
    truth = {
        "design": s.design,
        "task_label": s.task_label,
        "effect_pct": {"frontal_a": float(s.effect_pct), "frontal_b": float(s.control_effect_pct)},
        "recover_effect_pct": {"frontal_a": float(s.recover_effect_pct), "frontal_b": 0.0},
        "long_effect_pct": {
            "frontal_a": float(w_long[0] * s.effect_pct),
            "frontal_b": float(w_long[1] * s.control_effect_pct),
        },
        "scalp_task_pct": scalp_task_pct,
        "scalp_leak_pct": {
            name: float((1.0 - w) * scalp_task_pct) for name, w in zip(_LONG, w_long, strict=True)
        },
        "scalp_task_delay_s": float(s.scalp_task_delay_s),
        "task_heart_rate_bpm": task_heart_rate,
        "response_peak_s": peak,
        "block_gains": [float(g) for g in event_gains],
        "heart_rate_bpm": float(60.0 * (in_beats.size - 1) / (in_beats[-1] - in_beats[0]))
        if in_beats.size > 1
        else heart_rate,
        "heart_rate_set_bpm": heart_rate,
        "resp_rate_hz": float((resp_phase[-1] - resp_phase[pad]) / (2 * np.pi * (times[-1]))),
        "resp_rate_set_hz": resp_rate,
        "mayer_hz": mayer_hz,
        "brain_fraction_long": w_subject,
        "brain_fraction": {name: float(w) for name, w in zip(_LONG, w_long, strict=True)},
        "short_brain_fraction": w_short,
        "baseline_bfi_cm2_s": {name: float(b) for name, b in zip(names, baseline, strict=True)},
        "brain_bfi_cm2_s": {name: float(b) for name, b in zip(_LONG, brain_bfi_long, strict=True)},
        "scalp_bfi_cm2_s": float(scalp_bfi),
        "systemic_lag_s": systemic_lag,
        "slow_amplitude_pct": 100.0 * slow_amp,
        "cardiac_lag_s": cardiac_lag,
        "pulse_transit_s": transit,
        "amplitudes_pct": {k: float(v) for k, v in amplitudes.items()},
        "mean_count_rate_hz": {name: float(r) for name, r in zip(names, mean_rates, strict=True)},
        "noise_rel_std": {
            name: float(np.median(v)) for name, v in zip(names, noise_std.T, strict=True)
        },
        "beta": {name: float(b) for name, b in zip(names, beta, strict=True)},
        "n_beats": int(in_beats.size),
        "motion_events": motion_events,
        "n_outlier_samples": {
            name: int(v) for name, v in zip(names, wild.sum(axis=0), strict=True)
        },
    }
    components = {
        "pulse": now(pulse),
        "respiration": now(resp),
        "mayer": now(mayer),
        "scalp": scalp,
        "scalp_systemic": scalp_systemic,
        "brain_systemic": brain_systemic,
        "brain": brain,
        "slow": slow,
        "task": task,
        "scalp_task": scalp_task,
        "arousal": arousal,
        "relative": relative,
        "motion": flow_factor,
        "bfi_true": bfi_true,
        "beats_s": in_beats,
    }
    return SimulatedRecording(recording=recording, truth=truth, components=components)
