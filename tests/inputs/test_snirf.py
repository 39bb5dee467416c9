"""SNIRF details: units, the two-value time form, g2-only files, foreign data types."""

import h5py
import numpy as np
import pytest
from numpy.testing import assert_allclose, assert_array_equal

from fstats.inputs import read_snirf, write_snirf


def _written(tmp_path, build, **kw):
    recording = build(9, **kw)
    return recording, write_snirf(recording, tmp_path / "sub-01_task-subtract_dcs.snirf")


def test_length_and_time_units_are_converted(tmp_path, build):
    """Source: SNIRF specification - positions in LengthUnit, times in TimeUnit (metaDataTags)."""
    recording, path = _written(tmp_path, build, g2=True)
    with h5py.File(path, "r+") as f:
        f["/nirs/probe/detectorPos3D"][...] = f["/nirs/probe/detectorPos3D"][()] / 10.0
        del f["/nirs/metaDataTags/LengthUnit"]
        f["/nirs/metaDataTags"].create_dataset("LengthUnit", data="cm")
        f["/nirs/data1/time"][...] = f["/nirs/data1/time"][()] * 1000.0
        f["/nirs/probe/correlationTimeDelays"][...] = recording.lags_s * 1000.0
        del f["/nirs/metaDataTags/TimeUnit"]
        f["/nirs/metaDataTags"].create_dataset("TimeUnit", data="ms")
    back = read_snirf(path)
    assert [c.separation_cm for c in back.channels] == [1.0, 3.0, 3.0]
    assert_allclose(back.times_s, recording.times_s, rtol=1e-12, atol=1e-15)
    assert_allclose(back.lags_s, recording.lags_s, rtol=1e-12)


def test_two_value_time_form(tmp_path, build):
    """Source: SNIRF specification - time may be given as [start, step]."""
    recording, path = _written(tmp_path, build)
    with h5py.File(path, "r+") as f:
        del f["/nirs/data1/time"]
        f["/nirs/data1"].create_dataset("time", data=np.array([0.0, 0.05]))
    assert_allclose(read_snirf(path).times_s, recording.times_s, rtol=1e-12)


def test_bfi_in_mm2_per_s_is_converted(tmp_path, build):
    """Source: closed form - 1 mm²/s = 0.01 cm²/s."""
    recording, path = _written(tmp_path, build)
    with h5py.File(path, "r+") as f:
        f["/nirs/data1/dataTimeSeries"][:, :3] = recording.flow * 100.0
        for k in (1, 2, 3):
            del f[f"/nirs/data1/measurementList{k}/dataUnit"]
            f[f"/nirs/data1/measurementList{k}"].create_dataset("dataUnit", data="mm2/s")
    back = read_snirf(path)
    assert back.flow_unit == "cm2/s"
    assert_allclose(back.flow, recording.flow, rtol=1e-12)


def test_g2_only_file_gives_missing_flow(tmp_path, build):
    """Source: CONTRACTS section 10 - the flow stage fills flow from g2."""
    recording, path = _written(tmp_path, build, g2=True)
    with h5py.File(path, "r+") as f:
        data = f["/nirs/data1"]
        series = data["dataTimeSeries"][()][:, 3:]
        del data["dataTimeSeries"]
        data.create_dataset("dataTimeSeries", data=series)
        for k in range(1, 4):
            del data[f"measurementList{k}"]
        for k in range(4, 4 + 48 + 3):  # g2 lags, then count rates
            data.move(f"measurementList{k}", f"measurementList{k - 3}")
    back = read_snirf(path)
    assert back.provenance["flow_missing"] is True
    assert np.isnan(back.flow).all()
    assert_array_equal(back.g2, recording.g2)
    assert_array_equal(back.count_rate_hz, recording.count_rate_hz)


def test_foreign_measurements_are_ignored(tmp_path, build):
    """Source: SNIRF specification - dataType 1 is continuous-wave amplitude, not DCS."""
    recording, path = _written(tmp_path, build)
    with h5py.File(path, "r+") as f:
        data = f["/nirs/data1"]
        series = data["dataTimeSeries"][()]
        del data["dataTimeSeries"]
        data.create_dataset("dataTimeSeries", data=np.column_stack([series, series[:, 0]]))
        extra = data.create_group("measurementList4")
        for field, value in (
            ("sourceIndex", 1),
            ("detectorIndex", 1),
            ("wavelengthIndex", 1),
            ("dataType", 1),
            ("dataTypeIndex", 1),
        ):
            extra.create_dataset(field, data=np.int32(value))
    back = read_snirf(path)
    assert_array_equal(back.flow, recording.flow)


def test_names_without_detector_labels(tmp_path, build):
    """Source: SNIRF specification - detectorLabels are optional; channels fall back to S/D."""
    _, path = _written(tmp_path, build)
    with h5py.File(path, "r+") as f:
        del f["/nirs/probe/detectorLabels"]
        del f["/nirs/metaDataTags/fstats_short_channels"]
    back = read_snirf(path, short_threshold_cm=1.2)
    assert back.channel_names == ("S1-D1", "S1-D2", "S1-D3")
    assert back.short_channels == ("S1-D1",)
    with pytest.raises(KeyError):
        back.channel_index("scalp")


def test_subject_from_file_name_or_metadata(tmp_path, build):
    """Source: SNIRF specification - metaDataTags/SubjectID names the participant."""
    recording = build(2, subject="sub-05")
    plain = write_snirf(recording, tmp_path / "recording.snirf")
    assert read_snirf(plain).subject == "sub-05"
    anonymous = build(2, subject=None)
    assert read_snirf(write_snirf(anonymous, tmp_path / "other.snirf")).subject is None
    named = write_snirf(anonymous, tmp_path / "sub-09_task-cue_dcs.snirf")
    assert read_snirf(named).subject == "sub-09"


def test_transposed_data_is_read_with_a_repair(tmp_path, build):
    """Source: common practice - column-major writers store (n_measurements, n_times)."""
    from fstats.errors import InputRepairWarning

    recording, path = _written(tmp_path, build)
    with h5py.File(path, "r+") as f:
        series = f["/nirs/data1/dataTimeSeries"][()]
        del f["/nirs/data1/dataTimeSeries"]
        f["/nirs/data1"].create_dataset("dataTimeSeries", data=series.T)
    with pytest.warns(InputRepairWarning, match="transposed"):
        back = read_snirf(path)
    assert_array_equal(back.flow, recording.flow)
    assert back.provenance["repairs"][0]["kind"] == "transposed_data"


def test_file_written_by_hand_with_other_conventions(tmp_path):
    """Source: SNIRF specification - fixed-length strings, (1,)-shaped integers, 2-D probe."""
    path = tmp_path / "hand.snirf"
    times = np.arange(400) / 10.0
    rng = np.random.default_rng(0)
    flow = 1e-8 * np.exp(0.05 * rng.standard_normal((400, 2)))
    with h5py.File(path, "w") as f:
        f.create_dataset("formatVersion", data=np.bytes_("1.0"))
        nirs = f.create_group("nirs")
        meta = nirs.create_group("metaDataTags")
        meta.create_dataset("LengthUnit", data=np.array([b"mm"]))
        data = nirs.create_group("data1")
        data.create_dataset("dataTimeSeries", data=flow)
        data.create_dataset("time", data=np.array([0.0, 0.1]))
        for k, detector in ((1, 1), (2, 2)):
            entry = data.create_group(f"measurementList{k}")
            entry.create_dataset("sourceIndex", data=np.array([1], dtype=np.int64))
            entry.create_dataset("detectorIndex", data=np.array([detector], dtype=np.int64))
            entry.create_dataset("wavelengthIndex", data=np.array([1.0]))
            entry.create_dataset("dataType", data=np.array([410]))
        probe = nirs.create_group("probe")
        probe.create_dataset("wavelengths", data=np.array([850.0]))
        probe.create_dataset("sourcePos2D", data=np.array([[0.0, 0.0]]))
        probe.create_dataset("detectorPos2D", data=np.array([[8.0, 6.0], [0.0, 35.0]]))
        stim = nirs.create_group("stim1")
        stim.create_dataset("name", data=np.bytes_("tap"))
        stim.create_dataset("data", data=np.array([12.0, 5.0, 1.0]))  # one event, 1-D
        aux = nirs.create_group("aux1")
        aux.create_dataset("name", data=np.bytes_("ppg"))
        aux.create_dataset("dataTimeSeries", data=np.ones((40, 1)))
        aux.create_dataset("time", data=np.arange(40) / 1.0)
    back = read_snirf(path)
    assert_allclose(back.times_s, times, rtol=1e-12)
    assert_array_equal(back.flow, flow)
    assert [(c.name, c.separation_cm, c.is_short, c.wavelength_nm) for c in back.channels] == [
        ("S1-D1", 1.0, True, 850.0),  # |(8, 6)| = 10 mm
        ("S1-D2", 3.5, False, 850.0),
    ]
    assert back.events.conditions == ("tap",) and back.events.onsets_s.tolist() == [12.0]
    assert back.aux["ppg"].values.shape == (40,) and back.aux["ppg"].unit == "a.u."
