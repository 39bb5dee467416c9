"""Tests of fstats/cli/_flowfit.py: SNIRF with g2 in, flow table or SNIRF 410 out."""

import json

import numpy as np
import pytest

from fstats.cli import main
from fstats.flow.forward import g1_semi_infinite, g2_from_g1
from fstats.flow.noise import multi_tau_lags
from fstats.inputs import Channel, Recording, read_flow_table, read_snirf, write_snirf


def _g2_snirf(path, *, bad_row=None):
    rng = np.random.default_rng(0)
    t = np.arange(0, 30, 0.05)
    lags = multi_tau_lags(50)
    channels = (Channel("scalp", 1.0, True, 785.0), Channel("frontal_a", 3.0, False, 785.0))
    bfi = np.array([0.6e-8, 1.1e-8]) * (1 + 0.1 * np.sin(2 * np.pi * 1.1 * t))[:, None]
    g2 = np.stack(
        [
            g2_from_g1(g1_semi_infinite(lags, bfi[:, c], separation_cm=ch.separation_cm), 0.5)
            for c, ch in enumerate(channels)
        ],
        axis=1,
    )
    g2 += 0.003 * rng.standard_normal(g2.shape)
    if bad_row is not None:
        g2[bad_row, 1, :] = 1.5
    # a placeholder BFi (410) beside the g2: the fit replaces it (write_snirf always writes 410)
    rec = Recording(t, np.full((t.size, 2), 1e-8), channels, g2=g2, lags_s=lags)
    write_snirf(rec, path)
    return bfi


def test_flowfit_writes_flow_table_mask_and_summary(tmp_path):
    """Source: common practice - the written flow table reads back as a Recording with BFi
    close to the simulated values, and the sidecars describe what was done."""
    source = tmp_path / "sub-01_task-subtract_dcs.snirf"
    bfi = _g2_snirf(source, bad_row=50)
    target = tmp_path / "out" / "sub-01_task-subtract_flow.tsv"
    assert main(["flowfit", str(source), str(target)]) == 0
    rec = read_flow_table(target)
    assert rec.channel_names == ("scalp", "frontal_a")
    assert np.nanmedian(np.abs(rec.flow / bfi - 1)) < 0.02
    summary = json.loads((tmp_path / "out" / "sub-01_task-subtract_flowfit.json").read_text())
    assert summary["curves"]["frontal_a"]["reasons"] == {"non-decaying g2": 1}
    assert summary["fit"]["weighting"] == "uniform"  # SNIRF holds no count rates
    mask = np.loadtxt(tmp_path / "out" / "sub-01_task-subtract_flowmask.tsv", skiprows=1)
    assert mask.shape == (600, 3) and mask[50, 2] == 1
    assert not list((tmp_path / "out").glob(".flowfit-*"))  # no staging left behind


def test_flowfit_writes_snirf_410_with_options(tmp_path):
    """Source: common practice - SNIRF output (dataType 410) reads back; fixed beta and a fit
    range are honoured and recorded."""
    source = tmp_path / "in_dcs.snirf"
    _g2_snirf(source)
    target = tmp_path / "out_dcs.snirf"
    code = main(
        ["flowfit", str(source), str(target), "--beta", "0.5", "--fit-range", "1e-6:1e-3",
         "--motion", "spline", "--baseline-window", "0:10"]
    )  # fmt: skip
    assert code == 0
    rec = read_snirf(target)
    assert rec.flow_unit == "relative"
    assert np.nanmean(rec.flow[rec.times_s <= 10]) == pytest.approx(1.0, abs=0.01)
    summary = json.loads((tmp_path / "out_flowfit.json").read_text())
    assert summary["fit"]["beta"] == 0.5 and summary["fit"]["fit_range_s"] == [1e-6, 1e-3]


def test_flowfit_bad_input_exits_2_and_writes_nothing(tmp_path, capsys):
    """Source: common practice - bad input is a one-line error, exit code 2, no output."""
    flow_only = tmp_path / "flow_dcs.snirf"
    t = np.arange(0, 10, 0.05)
    write_snirf(Recording(t, np.ones((t.size, 1)) * 1e-8, (Channel("a", 3.0, False),)), flow_only)
    target = tmp_path / "o_flow.tsv"
    assert main(["flowfit", str(flow_only), str(target)]) == 2
    err = capsys.readouterr().err
    assert "g2" in err and len(err.strip().splitlines()) == 1
    assert not target.exists()
    assert main(["flowfit", str(tmp_path / "missing.snirf"), str(target)]) == 2
    assert main(["flowfit", str(flow_only), str(tmp_path / "o.txt")]) == 2


def test_flowfit_help_names_units(capsys):
    """Source: common practice - the help lists inputs, outputs and units."""
    with pytest.raises(SystemExit):
        main(["flowfit", "--help"])
    text = capsys.readouterr().out
    for word in ("dataType 401", "cm²/s", "--fit-range", "--beta", "1/cm", "_flowmask.tsv"):
        assert word in text
