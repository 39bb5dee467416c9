"""Tests of fstats.fit.block_average (FIR and epoch time courses)."""

import warnings

import numpy as np
from numpy.testing import assert_allclose

from fstats.fit import BLOCK_AVERAGE_COLUMNS, SubjectGLM
from fstats.fit.block_average import epoch_average, fir_columns

from ._synthetic import block_recording


def test_fir_columns_partition_the_window():
    """Source: closed form - FIR bins after non-overlapping onsets sum to the window boxcar."""
    times = np.arange(0, 100, 0.5)
    cols = fir_columns(times, np.array([10.0, 60.0]), 2.0, 10)
    assert cols.shape == (200, 10)
    window = ((times >= 10) & (times < 30)) | ((times >= 60) & (times < 80))
    assert_allclose(cols.sum(axis=1), window.astype(float))


def test_epoch_average_of_noise_free_boxcar():
    """Source: closed form - flow 1 + 0.2 × boxcar gives 0 % before onset, 20 % inside."""
    times = np.arange(0, 300, 0.1)
    onsets = np.array([20.0, 120.0, 220.0])
    flow = np.ones(times.size)
    for o in onsets:
        flow[(times >= o) & (times < o + 30)] += 0.2
    t, mean, low, high = epoch_average(times, flow, onsets, pre_s=5, post_s=40, step_s=1.0)
    assert_allclose(mean[t < 0], 0.0, atol=1e-12)
    assert_allclose(mean[(t > 0) & (t < 30)], 20.0, atol=1e-9)
    assert_allclose(low, mean, atol=1e-9)  # no spread across identical epochs


def test_block_averages_table_and_model_curve_tracks_effect():
    """Source: common practice - FIR estimates of a 10 % boxcar effect plateau near 10 %,
    and epoch and model curves agree on the plateau within a few percent."""
    rec, design = block_recording(0, n_blocks=10, noise=0.01)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        fit = SubjectGLM(post_s=10.0).fit(rec, design)
    ba = fit.block_averages
    assert tuple(ba.columns) == BLOCK_AVERAGE_COLUMNS
    assert set(ba.source) == {"model", "epochs"}
    model = ba[(ba.channel == "frontal_a") & (ba.source == "model")]
    plateau = model[(model.time_s > 5) & (model.time_s < 28)]
    assert abs(plateau.mean_pct.median() - 10.0) < 1.5
    assert (plateau.ci_low_pct < plateau.mean_pct).all()
    epochs = ba[(ba.channel == "frontal_a") & (ba.source == "epochs")]
    inside = epochs[(epochs.time_s > 5) & (epochs.time_s < 28)]
    assert abs(inside.mean_pct.median() - plateau.mean_pct.median()) < 3.0
