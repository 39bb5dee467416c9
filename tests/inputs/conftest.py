"""Shared builders for the input tests: a small random recording (numpy rng, no outside files)."""

import numpy as np
import pytest

from fstats.inputs import AuxSignal, Channel, Recording, TaskTiming

FS_HZ = 20.0
N_TIMES = 1200  # 60 s


def make_recording(seed: int = 0, *, g2: bool = False, subject: str = "sub-01") -> Recording:
    """Three channels (1 cm short, two 3 cm long), BFi near 1e-8 cm²/s, events and aux."""
    rng = np.random.default_rng(seed)
    times = np.arange(N_TIMES) / FS_HZ
    flow = 1e-8 * np.exp(0.05 * rng.standard_normal((N_TIMES, 3)))
    channels = (
        Channel("scalp", 1.0, True, 785.0),
        Channel("frontal_a", 3.0, False, 785.0),
        Channel("frontal_b", 3.0, False, 785.0),
    )
    events = TaskTiming(
        onsets_s=np.array([5.0, 20.0, 35.0, 50.0]),
        durations_s=np.array([10.0, 8.5, 10.0, 0.0]),
        conditions=("subtract", "recover", "subtract", "recover"),
        amplitudes=np.array([1.0, 1.0, 0.5, 2.0]),
    )
    aux_times = np.arange(600) / 10.0
    aux = {
        "ppg": AuxSignal("ppg", aux_times, rng.standard_normal(600)),
        "resp": AuxSignal("resp", aux_times, rng.standard_normal(600)),
    }
    curves = lags = rates = None
    if g2:
        rates = rng.uniform(2e4, 1e5, size=(N_TIMES, 3))  # photons per second
        lags = np.geomspace(1e-7, 1e-2, 16)
        decay = rng.uniform(5e-6, 5e-5, size=(N_TIMES, 3, 1))
        curves = 1.0 + 0.5 * np.exp(-2.0 * lags / decay)
    return Recording(
        times_s=times,
        flow=flow,
        channels=channels,
        events=events,
        aux=aux,
        g2=curves,
        lags_s=lags,
        count_rate_hz=rates,
        subject=subject,
    )


@pytest.fixture
def build():
    """The recording builder: ``build(seed, g2=False, subject="sub-01") -> Recording``."""
    return make_recording
