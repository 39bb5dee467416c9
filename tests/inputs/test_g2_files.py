"""SNIRF files holding g2 curves before any fit: no BFi (410) block, count rates kept.

The recordings are simulated by fstats.simulate (physiology, count rates, g2 curves from the
semi-infinite diffusion model), shortened to 40 s at 10 Hz (100 multi-tau lags) to stay fast.
"""

import dataclasses
import json

import h5py
import numpy as np
import pandas as pd
import pytest
from numpy.testing import assert_array_equal

from fstats.cli import main
from fstats.inputs import read_flow_table, read_snirf, write_snirf
from fstats.simulate import SimulationSettings, simulate_recording

STEM = "sub-01_task-subtract"


@pytest.fixture(scope="module")
def g2_only():
    """A recording with g2 curves and count rates whose flow is not fitted yet (all NaN)."""
    settings = SimulationSettings(duration_s=40.0, sfreq_hz=10.0, with_g2=True)
    simulated = simulate_recording(settings, np.random.default_rng(4)).recording
    return dataclasses.replace(
        simulated,
        flow=np.full_like(simulated.flow, np.nan),
        provenance={"flow_missing": True},
    )


def _data_types(path):
    with h5py.File(path, "r") as f:
        data = f["/nirs/data1"]
        entries = [data[k] for k in data if k.startswith("measurementList")]
        return [
            (
                int(e["dataType"][()]),
                e["dataUnit"][()].decode() if "dataUnit" in e else "",
            )
            for e in entries
        ]


def test_g2_only_recording_round_trips(g2_only, tmp_path):
    """Source: SNIRF specification - 401 = DCS g2, 410 = DCS BFi; a file may hold only 401."""
    path = write_snirf(g2_only, tmp_path / f"{STEM}_dcs.snirf")
    types = _data_types(path)
    n_channels, n_lags = g2_only.g2.shape[1:]
    assert 410 not in {t for t, _ in types}
    assert sum(t == 401 for t, _ in types) == n_channels * n_lags
    back = read_snirf(path)
    assert back.provenance["flow_missing"] is True
    assert back.flow.shape == g2_only.flow.shape and np.isnan(back.flow).all()
    assert_array_equal(back.times_s, g2_only.times_s)
    assert_array_equal(back.g2, g2_only.g2)
    assert_array_equal(back.lags_s, g2_only.lags_s)
    assert_array_equal(back.count_rate_hz, g2_only.count_rate_hz)
    assert back.channel_names == g2_only.channel_names
    assert back.short_channels == g2_only.short_channels
    assert [c.separation_cm for c in back.channels] == [c.separation_cm for c in g2_only.channels]
    assert_array_equal(back.events.onsets_s, g2_only.events.onsets_s)
    assert list(back.aux) == list(g2_only.aux)


def test_count_rates_are_stored_as_intensity_in_hz(g2_only, tmp_path):
    """Source: SNIRF specification - dataType 1 is continuous-wave amplitude (here counts/s)."""
    fitted = dataclasses.replace(g2_only, flow=1e-8 * np.ones_like(g2_only.flow), provenance={})
    path = write_snirf(fitted, tmp_path / f"{STEM}_dcs.snirf")
    types = _data_types(path)
    assert types.count((1, "Hz")) == fitted.count_rate_hz.shape[1]
    with h5py.File(path, "r") as f:
        stored = f["/nirs/data1/dataTimeSeries"][()][:, -fitted.count_rate_hz.shape[1] :]
    assert_array_equal(stored, fitted.count_rate_hz)
    back = read_snirf(path)
    assert_array_equal(back.count_rate_hz, fitted.count_rate_hz)
    assert "flow_missing" not in back.provenance


def test_recording_without_flow_or_g2_is_not_written(g2_only, tmp_path):
    """Source: common practice - a writer must not leave a file its own reader refuses."""
    empty = dataclasses.replace(g2_only, g2=None, lags_s=None)
    target = tmp_path / f"{STEM}_dcs.snirf"
    with pytest.raises(ValueError, match="no flow values and no g2"):
        write_snirf(empty, target)
    assert list(tmp_path.iterdir()) == []


def test_flowfit_with_noise_model_from_a_g2_only_file(g2_only, tmp_path, capsys):
    """Source: Zhou et al. 2006 noise model needs count rates - they must survive the file.

    End to end: g2-only SNIRF -> ``fstats flowfit --weighting noise-model`` -> flow table
    with its ``_flowmask.tsv``; the mask read by fstats equals the file parsed by pandas.
    """
    source = write_snirf(g2_only, tmp_path / f"{STEM}_dcs.snirf")
    target = tmp_path / "out" / f"{STEM}_flow.tsv"
    code = main(["flowfit", str(source), str(target), "--weighting", "noise-model"])
    assert code == 0, capsys.readouterr().err
    summary = json.loads((target.parent / f"{STEM}_flowfit.json").read_text())
    assert summary["fit"]["weighting"] == "noise-model"
    back = read_flow_table(target)
    assert np.isfinite(back.flow).mean() > 0.9
    exclude = back.provenance["flow"]["masks"]["exclude"]
    reference = pd.read_csv(target.parent / f"{STEM}_flowmask.tsv", sep="\t")
    assert exclude.dtype == bool and exclude.shape == back.flow.shape
    assert_array_equal(exclude, reference[list(back.channel_names)].to_numpy() == 1)
