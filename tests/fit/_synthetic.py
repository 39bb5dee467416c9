"""Small synthetic recordings and designs for the fit tests (no simulator needed)."""

import numpy as np

from fstats.design.matrix import Contrast, DesignMatrix
from fstats.inputs.recording import Channel, Recording, TaskTiming


def block_recording(seed=0, *, n_blocks=8, sfreq_hz=10.0, effect=0.1, noise=0.02):
    """A 3-channel recording with 30 s task blocks every 60 s and a matching design.

    Flow is 1e-8 cm²/s times (1 + effect × boxcar + AR(1) noise); channel 'scalp' is short.
    """
    rng = np.random.default_rng(seed)
    duration = 60.0 * n_blocks + 20.0
    times = np.arange(0.0, duration, 1.0 / sfreq_hz)
    onsets = 10.0 + 60.0 * np.arange(n_blocks)
    box = np.zeros(times.size)
    for onset in onsets:
        box[(times >= onset) & (times < onset + 30.0)] = 1.0
    flows = []
    for gain in (0.0, effect, 0.0):
        e = np.zeros(times.size)
        w = rng.standard_normal(times.size) * noise
        for t in range(1, times.size):
            e[t] = 0.7 * e[t - 1] + w[t]
        flows.append(1e-8 * (1.0 + gain * box + e))
    channels = (
        Channel("scalp", 1.0, True),
        Channel("frontal_a", 3.0, False),
        Channel("frontal_b", 3.0, False),
    )
    events = TaskTiming(onsets, np.full(n_blocks, 30.0), ("task",) * n_blocks, np.ones(n_blocks))
    rec = Recording(
        times_s=times,
        flow=np.column_stack(flows),
        channels=channels,
        events=events,
        source="synthetic",
        subject="sub-01",
    )
    n = times.size
    cols = [box, np.ones(n)] + [
        np.cos(np.pi * k * (2 * np.arange(n) + 1) / (2 * n)) for k in (1, 2, 3)
    ]
    names = ("task", "constant", "drift_01", "drift_02", "drift_03")
    kinds = ("task", "constant", "drift", "drift", "drift")
    values = np.column_stack(cols)
    contrasts = (
        Contrast("task", np.array([[1.0, 0, 0, 0, 0]]), "t"),
        Contrast("task_F", np.array([[1.0, 0, 0, 0, 0]]), "F"),
    )
    design = DesignMatrix(
        values=values,
        names=names,
        kinds=kinds,
        times_s=times,
        conditions={"task": ("task",)},
        contrasts=contrasts,
    )
    return rec, design
