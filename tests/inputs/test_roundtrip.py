"""The same recording read from TSV, CSV and SNIRF gives identical arrays."""

import numpy as np
import pytest
from numpy.testing import assert_array_equal

from fstats.inputs import (
    read_channels,
    read_events,
    read_flow_table,
    read_recording,
    read_snirf,
    write_flow_table,
    write_snirf,
)


def _same_recording(a, b):
    assert_array_equal(a.times_s, b.times_s)
    assert_array_equal(a.flow, b.flow)
    assert a.flow_unit == b.flow_unit
    assert [(c.name, c.separation_cm, c.is_short, c.wavelength_nm) for c in a.channels] == [
        (c.name, c.separation_cm, c.is_short, c.wavelength_nm) for c in b.channels
    ]
    assert_array_equal(a.events.onsets_s, b.events.onsets_s)
    assert_array_equal(a.events.durations_s, b.events.durations_s)
    assert_array_equal(a.events.amplitudes, b.events.amplitudes)
    assert a.events.conditions == b.events.conditions
    assert list(a.aux) == list(b.aux)
    for name in a.aux:
        assert_array_equal(a.aux[name].times_s, b.aux[name].times_s)
        assert_array_equal(a.aux[name].values, b.aux[name].values)


@pytest.mark.parametrize(
    "name",
    [
        "sub-01_task-subtract_flow.tsv",
        "sub-01_task-subtract_flow.csv",
        "sub-01_task-subtract_dcs.snirf",
    ],
)
def test_each_format_round_trips_exactly(build, tmp_path, name):
    """Source: common practice - writing then reading loses nothing (shortest repr floats)."""
    original = build(3)
    path = tmp_path / "sub-01" / name
    (write_snirf if name.endswith(".snirf") else write_flow_table)(original, path)
    back = read_recording(path)
    _same_recording(original, back)
    assert back.subject == "sub-01" and back.session is None
    assert back.source == str(path)
    assert back.provenance["repairs"] == []


def test_tsv_csv_and_snirf_give_identical_arrays(build, tmp_path):
    """Source: issue acceptance - the same recording from CSV, TSV and SNIRF is identical."""
    original = build(7)
    tsv = write_flow_table(original, tmp_path / "tsv" / "sub-01_task-subtract_run-2_flow.tsv")
    csv = write_flow_table(original, tmp_path / "csv" / "sub-01_task-subtract_run-2_flow.csv")
    snirf = write_snirf(original, tmp_path / "h5" / "sub-01_task-subtract_run-2_dcs.snirf")
    a, b, c = (read_recording(p) for p in (tsv, csv, snirf))
    _same_recording(a, b)
    _same_recording(a, c)
    assert a.session == b.session == c.session == "run-2"


def test_csv_file_really_uses_commas(build, tmp_path):
    """Source: common practice - CSV separates with commas, TSV with tabs."""
    original = build(1)
    csv = write_flow_table(original, tmp_path / "rec_flow.csv")
    tsv = write_flow_table(original, tmp_path / "other_flow.tsv")
    assert csv.read_text().splitlines()[0] == "time,scalp,frontal_a,frontal_b"
    assert tsv.read_text().splitlines()[0] == "time\tscalp\tfrontal_a\tfrontal_b"


def test_snirf_round_trip_with_g2_lags_stims_and_aux(build, tmp_path):
    """Source: SNIRF specification - 401 g2 per lag via dataTypeIndex into correlationTimeDelays."""
    original = build(5, g2=True)
    path = write_snirf(original, tmp_path / "sub-01_task-subtract_dcs.snirf")
    back = read_snirf(path)
    _same_recording(original, back)
    assert back.g2.shape == (1200, 3, 16)
    assert_array_equal(back.g2, original.g2)
    assert_array_equal(back.lags_s, original.lags_s)
    assert_array_equal(back.count_rate_hz, original.count_rate_hz)
    assert back.short_channels == ("scalp",)


def test_snirf_layout_follows_the_standard(build, tmp_path):
    """Source: SNIRF specification (recalled from memory) - formatVersion, data1 shape, dataType."""
    import h5py

    original = build(2, g2=True)
    path = write_snirf(original, tmp_path / "x_dcs.snirf")
    with h5py.File(path, "r") as f:
        assert f["formatVersion"][()].decode() == "1.1"
        assert f["/nirs/data1/dataTimeSeries"].shape == (1200, 3 + 3 * 16 + 3)
        assert f["/nirs/data1/time"].shape == (1200,)
        assert int(f["/nirs/data1/measurementList1/dataType"][()]) == 410
        assert int(f["/nirs/data1/measurementList4/dataType"][()]) == 401
        assert int(f["/nirs/data1/measurementList5/dataTypeIndex"][()]) == 2
        rate = f["/nirs/data1/measurementList52"]  # count rates last: dataType 1, unit Hz
        assert int(rate["dataType"][()]) == 1 and rate["dataUnit"][()].decode() == "Hz"
        assert f["/nirs/metaDataTags/LengthUnit"][()].decode() == "mm"
        detectors = f["/nirs/probe/detectorPos3D"][()]
        assert np.linalg.norm(detectors, axis=1) == pytest.approx([10.0, 30.0, 30.0])
        assert f["/nirs/stim1/data"].shape == (2, 3)


def test_sidecars_are_written_by_stem(build, tmp_path):
    """Source: CONTRACTS section 1 - sidecars share the recording's stem."""
    original = build(4)
    write_flow_table(original, tmp_path / "sub-01_task-subtract_flow.tsv")
    names = sorted(p.name for p in tmp_path.iterdir())
    assert names == [
        "sub-01_task-subtract_aux.tsv",
        "sub-01_task-subtract_channels.tsv",
        "sub-01_task-subtract_events.tsv",
        "sub-01_task-subtract_flow.tsv",
    ]
    channels = read_channels(tmp_path / "sub-01_task-subtract_channels.tsv")
    assert [c.is_short for c in channels] == [True, False, False]
    events = read_events(tmp_path / "sub-01_task-subtract_events.tsv")
    assert events.condition_names == ("subtract", "recover")


def test_explicit_sidecar_arguments(build, tmp_path):
    """Source: CONTRACTS section 2 - channels/events may be passed as objects instead of files."""
    original = build(6)
    path = write_flow_table(original, tmp_path / "a_flow.tsv")
    (tmp_path / "a_events.tsv").unlink()
    (tmp_path / "a_aux.tsv").unlink()
    back = read_flow_table(path, channels=original.channels, events=original.events)
    assert back.events is original.events
    assert back.aux == {}
    assert_array_equal(back.flow, original.flow)


def test_input_recording_is_not_modified(build, tmp_path):
    """Source: common practice - writers leave their arguments alone."""
    original = build(8, g2=True)
    flow, g2 = original.flow.copy(), original.g2.copy()
    write_snirf(original, tmp_path / "r_dcs.snirf")
    write_flow_table(original, tmp_path / "r_flow.tsv")
    assert_array_equal(original.flow, flow)
    assert_array_equal(original.g2, g2)


def test_quoted_cells_read_the_same(build, tmp_path):
    """Source: RFC 4180 (CSV) - a quoted field holds the same text as an unquoted one."""
    original = build(12)
    path = write_flow_table(original, tmp_path / "q_flow.csv")
    lines = path.read_text().splitlines()
    lines[0] = ",".join(f'"{name}"' for name in lines[0].split(","))
    lines[5] = ",".join(f'"{cell}"' for cell in lines[5].split(","))
    path.write_text("\n".join(lines) + "\n")
    back = read_flow_table(path)
    assert_array_equal(back.flow, original.flow)
    assert_array_equal(back.times_s, original.times_s)


def test_windows_line_endings_and_byte_order_mark(build, tmp_path):
    """Source: common practice - spreadsheet exports add CRLF line ends and a UTF-8 BOM."""
    original = build(13)
    path = write_flow_table(original, tmp_path / "w_flow.csv")
    path.write_bytes(b"\xef\xbb\xbf" + path.read_bytes().replace(b"\n", b"\r\n"))
    back = read_flow_table(path)
    assert_array_equal(back.flow, original.flow)


def test_channel_rows_in_any_order(build, tmp_path):
    """Source: CONTRACTS section 1 - channels are matched to flow columns by name."""
    original = build(14)
    path = write_flow_table(original, tmp_path / "o_flow.tsv")
    sidecar = tmp_path / "o_channels.tsv"
    lines = sidecar.read_text().splitlines()
    sidecar.write_text("\n".join([lines[0], lines[3], lines[1], lines[2]]) + "\n")
    back = read_flow_table(path)
    assert back.channel_names == ("scalp", "frontal_a", "frontal_b")
    assert back.short_channels == ("scalp",)


def test_unwritable_aux_leaves_no_files(build, tmp_path):
    """Source: common practice - a failed write leaves nothing half-written behind."""
    import dataclasses

    from fstats.inputs import AuxSignal

    original = build(15)
    aux = dict(original.aux)
    aux["accel_x"] = AuxSignal("accel_x", np.arange(50) / 5.0, np.zeros(50))
    broken = dataclasses.replace(original, aux=aux)
    with pytest.raises(ValueError, match="different time bases"):
        write_flow_table(broken, tmp_path / "b_flow.tsv")
    assert list(tmp_path.iterdir()) == []
    write_snirf(broken, tmp_path / "b_dcs.snirf")  # SNIRF keeps one time base per signal
    back = read_snirf(tmp_path / "b_dcs.snirf")
    assert_array_equal(back.aux["accel_x"].times_s, np.arange(50) / 5.0)
    assert [p.name for p in tmp_path.iterdir()] == ["b_dcs.snirf"]
