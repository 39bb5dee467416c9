"""Writing group results: fstats.group.writing."""

import json

import numpy as np
import pytest
from numpy.testing import assert_allclose

from fstats.group import GroupModel, read_group_table, write_group_results


def test_round_trip_and_sidecar(cohort, tmp_path):
    """Source: common practice - what is written reads back; the sidecar names the model."""
    tables, participants = cohort
    participants = participants[participants["participant_id"] != "sub-03"]
    res = GroupModel(kind="two-sample", weighting="reml").fit(tables, participants)
    tsv, sidecar = write_group_results(res, tmp_path / "group", provenance={"inputs": {"a": "x"}})
    back = read_group_table(tsv)
    assert list(back.columns) == list(res.table().columns)
    assert_allclose(back["p"], res.table()["p"], rtol=1e-9)
    meta = json.loads(sidecar.read_text())
    assert meta["model"]["kind"] == "two-sample" and meta["model"]["weighting"] == "reml"
    assert {"numpy", "scipy", "statsmodels", "pandas", "fstats"} <= set(meta["packages"])
    assert meta["inputs"] == {"a": "x"}
    assert meta["exclusions"][0]["participant_id"] == "sub-03"
    for name in meta["files"].values():
        assert (tmp_path / "group" / name).is_file()
    assert not list((tmp_path / "group").glob("*.tmp"))


def test_failure_leaves_no_partial_files(cohort, tmp_path, monkeypatch):
    """Source: common practice - atomic writes: a failure mid-way leaves nothing behind."""
    import os

    tables, participants = cohort
    res = GroupModel().fit(tables, participants)
    calls = {"n": 0}
    real = os.replace

    def failing(src, dst):
        calls["n"] += 1
        if calls["n"] == 3:
            raise OSError("disk full")
        return real(src, dst)

    monkeypatch.setattr(os, "replace", failing)
    with pytest.raises(OSError):
        write_group_results(res, tmp_path)
    assert not list(tmp_path.glob("*.tmp")) and not list(tmp_path.glob(".*.tmp"))
    assert np.isfinite(res.table()["p"]).all()
