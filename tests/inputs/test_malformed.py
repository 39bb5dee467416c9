"""Malformed inputs are refused with one line naming the file and the line, column or field.

Each case builds a valid recording with the writers, breaks one thing, and checks the
message of the InputError (library) and the command line's behaviour (exit code 2, one
line on stderr, no traceback).
"""

import subprocess
import sys

import h5py
import numpy as np
import pytest

from fstats.cli import main
from fstats.errors import InputError
from fstats.inputs import read_recording, write_flow_table, write_snirf

STEM = "sub-01_task-subtract"


def _tsv(tmp_path, build, suffix="tsv"):
    return write_flow_table(build(11), tmp_path / f"{STEM}_flow.{suffix}")


def _lines(path):
    return path.read_text().splitlines()


def _put(path, lines):
    path.write_text("\n".join(lines) + "\n")


def _set_cell(path, line, column, text):
    lines = _lines(path)
    sep = "\t" if path.suffix == ".tsv" else ","
    cells = lines[line - 1].split(sep)
    cells[column] = text
    lines[line - 1] = sep.join(cells)
    _put(path, lines)


# Each case: (tmp_path, build) -> (path to read, file blamed, fragments of the location).
def empty_file(tmp_path, build):
    path = _tsv(tmp_path, build)
    path.write_text("")
    return path, path, ["line 1", "empty file"]


def header_only(tmp_path, build):
    path = _tsv(tmp_path, build)
    _put(path, _lines(path)[:1])
    return path, path, ["line 2", "no data rows"]


def missing_time_column(tmp_path, build):
    path = _tsv(tmp_path, build)
    lines = _lines(path)
    lines[0] = lines[0].replace("time", "Time", 1)
    _put(path, lines)
    return path, path, ["line 1 (header)", "'time'", "did you mean 'Time'"]


def non_numeric_cell(tmp_path, build):
    path = _tsv(tmp_path, build)
    _set_cell(path, 7, 2, "1.2e-8x")
    return path, path, ["line 7, column 'frontal_a'", "1.2e-8x"]


def ragged_row(tmp_path, build):
    path = _tsv(tmp_path, build, "csv")
    lines = _lines(path)
    lines[9] += ",1e-8"
    _put(path, lines)
    return path, path, ["line 10", "4 comma-separated cells", "5 cells"]


def conflicting_duplicate_time(tmp_path, build):
    path = _tsv(tmp_path, build)
    lines = _lines(path)
    cells = lines[5].split("\t")  # line 6 repeats the time of line 5 with other values
    cells[0] = lines[4].split("\t")[0]
    lines[5] = "\t".join(cells)
    _put(path, lines)
    return path, path, ["line 6, column 'time'", "line 5", "different values"]


def time_going_back(tmp_path, build):
    path = _tsv(tmp_path, build)
    _set_cell(path, 40, 0, "0.5")
    return path, path, ["line 40, column 'time'", "increasing"]


def irregular_step(tmp_path, build):
    path = _tsv(tmp_path, build)
    lines = _lines(path)
    for number in range(101, len(lines) + 1):  # from line 101 on, a step of 1.5 samples
        cells = lines[number - 1].split("\t")
        cells[0] = repr(float(cells[0]) + 0.025)
        lines[number - 1] = "\t".join(cells)
    _put(path, lines)
    return path, path, ["line 101, column 'time'", "regular time step"]


def time_in_milliseconds(tmp_path, build):
    path = _tsv(tmp_path, build)
    lines = _lines(path)
    for number in range(2, len(lines) + 1):
        cells = lines[number - 1].split("\t")
        cells[0] = repr(float(cells[0]) * 1000.0)
        lines[number - 1] = "\t".join(cells)
    _put(path, lines)
    return path, path, ["column 'time'", "milliseconds"]


def missing_time_cell(tmp_path, build):
    path = _tsv(tmp_path, build)
    _set_cell(path, 12, 0, "n/a")
    return path, path, ["line 12, column 'time'", "a number"]


def negative_bfi(tmp_path, build):
    path = _tsv(tmp_path, build)
    _set_cell(path, 30, 1, "-1e-9")
    return path, path, ["line 30, column 'scalp'", "BFi in cm²/s > 0"]


def zero_bfi(tmp_path, build):
    path = _tsv(tmp_path, build)
    _set_cell(path, 31, 3, "0")
    return path, path, ["line 31, column 'frontal_b'", "> 0"]


def bfi_in_mm2_per_s(tmp_path, build):
    recording = build(11)
    recording.flow[:, 1] *= 100.0  # frontal_a written in mm²/s
    path = write_flow_table(recording, tmp_path / f"{STEM}_flow.tsv")
    return path, path, ["column 'frontal_a'", "median", "mm²/s"]


def bfi_scaled_by_1e8(tmp_path, build):
    recording = build(11)
    recording.flow[:] *= 1e8
    path = write_flow_table(recording, tmp_path / f"{STEM}_flow.tsv")
    return path, path, ["column 'scalp'", "median", "'relative'"]


def mostly_missing_channel(tmp_path, build):
    recording = build(11)
    recording.flow[100:900, 2] = np.nan
    path = write_flow_table(recording, tmp_path / f"{STEM}_flow.tsv")
    return path, path, ["column 'frontal_b'", "line 102", "missing"]


def semicolon_separator(tmp_path, build):
    path = _tsv(tmp_path, build, "csv")
    _put(path, [line.replace(",", ";") for line in _lines(path)])
    return path, path, ["line 1 (header)", "semicolon"]


def tab_table_named_csv(tmp_path, build):
    path = _tsv(tmp_path, build)
    renamed = path.with_name(f"{STEM}_flow.csv")
    path.rename(renamed)
    return renamed, renamed, ["line 1 (header)", "tab-separated"]


def unknown_suffix(tmp_path, build):
    path = _tsv(tmp_path, build)
    renamed = path.with_name(f"{STEM}_flow.txt")
    path.rename(renamed)
    return renamed, renamed, ["file name", ".txt"]


def channels_not_matching_header(tmp_path, build):
    path = _tsv(tmp_path, build)
    channels = tmp_path / f"{STEM}_channels.tsv"
    _put(channels, [line.replace("frontal_b", "frontal_c") for line in _lines(channels)])
    return path, channels, ["column 'name'", "no row for 'frontal_b'"]


def channels_sidecar_missing(tmp_path, build):
    path = _tsv(tmp_path, build)
    channels = tmp_path / f"{STEM}_channels.tsv"
    channels.unlink()
    return path, channels, ["file", "channel sidecar"]


def channels_bad_separation(tmp_path, build):
    path = _tsv(tmp_path, build)
    channels = tmp_path / f"{STEM}_channels.tsv"
    _set_cell(channels, 3, 1, "-3")
    return path, channels, ["line 3, column 'separation_cm'", "> 0"]


def channels_in_millimetres(tmp_path, build):
    path = _tsv(tmp_path, build)
    channels = tmp_path / f"{STEM}_channels.tsv"
    _set_cell(channels, 4, 1, "30")
    return path, channels, ["line 4, column 'separation_cm'", "look like mm"]


def channels_bad_role(tmp_path, build):
    path = _tsv(tmp_path, build)
    channels = tmp_path / f"{STEM}_channels.tsv"
    _set_cell(channels, 2, 2, "shrot")
    return path, channels, ["line 2, column 'role'", "did you mean 'short'"]


def channels_bad_unit(tmp_path, build):
    path = _tsv(tmp_path, build)
    channels = tmp_path / f"{STEM}_channels.tsv"
    _set_cell(channels, 4, 4, "mm2/s")
    return path, channels, ["line 4, column 'units'", "cm2/s"]


def event_after_end(tmp_path, build):
    path = _tsv(tmp_path, build)
    events = tmp_path / f"{STEM}_events.tsv"
    _set_cell(events, 3, 0, "75.0")  # the recording lasts 60 s
    return path, events, ["line 3, column 'onset'", "end of the recording (60 s)"]


def event_negative_duration(tmp_path, build):
    path = _tsv(tmp_path, build)
    events = tmp_path / f"{STEM}_events.tsv"
    _set_cell(events, 4, 1, "-2")
    return path, events, ["line 4, column 'duration'", ">= 0"]


def events_without_trial_type(tmp_path, build):
    path = _tsv(tmp_path, build)
    events = tmp_path / f"{STEM}_events.tsv"
    _put(events, [line.replace("trial_type", "condition") for line in _lines(events)])
    return path, events, ["line 1 (header)", "'trial_type'"]


def _snirf(tmp_path, build, g2=False):
    return write_snirf(build(11, g2=g2), tmp_path / f"{STEM}_dcs.snirf")


def snirf_without_data(tmp_path, build):
    path = _snirf(tmp_path, build)
    with h5py.File(path, "r+") as f:
        del f["/nirs/data1"]
    return path, path, ["/nirs/data1", "data group"]


def snirf_wrong_data_type(tmp_path, build):
    path = _snirf(tmp_path, build)
    with h5py.File(path, "r+") as f:
        for k in range(1, 4):
            f[f"/nirs/data1/measurementList{k}/dataType"][()] = 1
    return path, path, ["dataType", "401 g2 or 410 BFi", "continuous-wave"]


def snirf_missing_time(tmp_path, build):
    path = _snirf(tmp_path, build)
    with h5py.File(path, "r+") as f:
        del f["/nirs/data1/time"]
    return path, path, ["/nirs/data1/time", "missing"]


def snirf_g2_without_lags(tmp_path, build):
    path = _snirf(tmp_path, build, g2=True)
    with h5py.File(path, "r+") as f:
        del f["/nirs/probe/correlationTimeDelays"]
    return path, path, ["/nirs/probe/correlationTimeDelays", "401"]


def snirf_nonpositive_lags(tmp_path, build):
    path = _snirf(tmp_path, build, g2=True)
    with h5py.File(path, "r+") as f:
        f["/nirs/probe/correlationTimeDelays"][0] = 0.0
    return path, path, ["/nirs/probe/correlationTimeDelays", "lag times > 0"]


def snirf_wrong_length_unit(tmp_path, build):
    path = _snirf(tmp_path, build)
    with h5py.File(path, "r+") as f:
        del f["/nirs/metaDataTags/LengthUnit"]
        f["/nirs/metaDataTags"].create_dataset("LengthUnit", data="m")
    return path, path, ["/nirs/probe/detectorPos3D", "LengthUnit"]


def snirf_negative_bfi(tmp_path, build):
    path = _snirf(tmp_path, build)
    with h5py.File(path, "r+") as f:
        f["/nirs/data1/dataTimeSeries"][4, 1] = -1e-9
    return path, path, ["/nirs/data1/dataTimeSeries, row 5", "channel 'frontal_a'"]


def snirf_stim_after_end(tmp_path, build):
    path = _snirf(tmp_path, build)
    with h5py.File(path, "r+") as f:
        f["/nirs/stim1/data"][1, 0] = 90.0
    return path, path, ["/nirs/stim1/data, row 2, column 'onset'", "end of the recording"]


def snirf_not_hdf5(tmp_path, build):
    path = tmp_path / f"{STEM}_dcs.snirf"
    path.write_text("time\tscalp\n0\t1e-8\n")
    return path, path, ["file", "HDF5"]


def snirf_missing_format_version(tmp_path, build):
    path = _snirf(tmp_path, build)
    with h5py.File(path, "r+") as f:
        del f["/formatVersion"]
    return path, path, ["/formatVersion", "missing"]


CASES = [
    empty_file,
    header_only,
    missing_time_column,
    non_numeric_cell,
    ragged_row,
    conflicting_duplicate_time,
    time_going_back,
    irregular_step,
    time_in_milliseconds,
    missing_time_cell,
    negative_bfi,
    zero_bfi,
    bfi_in_mm2_per_s,
    bfi_scaled_by_1e8,
    mostly_missing_channel,
    semicolon_separator,
    tab_table_named_csv,
    unknown_suffix,
    channels_not_matching_header,
    channels_sidecar_missing,
    channels_bad_separation,
    channels_in_millimetres,
    channels_bad_role,
    channels_bad_unit,
    event_after_end,
    event_negative_duration,
    events_without_trial_type,
    snirf_without_data,
    snirf_wrong_data_type,
    snirf_missing_time,
    snirf_g2_without_lags,
    snirf_nonpositive_lags,
    snirf_wrong_length_unit,
    snirf_negative_bfi,
    snirf_stim_after_end,
    snirf_not_hdf5,
    snirf_missing_format_version,
]


@pytest.mark.parametrize("case", CASES, ids=lambda c: c.__name__)
def test_library_error_names_file_and_place(case, tmp_path, build):
    """Source: common practice - an input error says which file, where, expected and found."""
    path, blamed, fragments = case(tmp_path, build)
    with pytest.raises(InputError) as caught:
        read_recording(path)
    message = str(caught.value)
    assert "\n" not in message
    assert message.startswith(f"{blamed}, "), message
    for fragment in fragments:
        assert fragment in message, f"{fragment!r} not in {message!r}"


@pytest.mark.parametrize("case", CASES, ids=lambda c: c.__name__)
def test_command_line_exits_2_with_one_line(case, tmp_path, build, capsys):
    """Source: issue acceptance - exit code 2, one line on stderr, no traceback."""
    path, blamed, fragments = case(tmp_path, build)
    code = main(["inspect", str(path)])
    captured = capsys.readouterr()
    assert code == 2
    lines = captured.err.strip().splitlines()
    assert len(lines) == 1, captured.err
    assert lines[0].startswith(f"fstats inspect: error: {blamed}, ")
    assert fragments[0] in lines[0]
    assert "Traceback" not in captured.err + captured.out


@pytest.mark.parametrize("case", [snirf_wrong_data_type], ids=lambda c: c.__name__)
def test_module_entry_point_exits_2_without_traceback(case, tmp_path, build):
    """Source: issue acceptance - `python -m fstats inspect` on bad input: exit 2, one line."""
    path, blamed, fragments = case(tmp_path, build)
    done = subprocess.run(
        [sys.executable, "-m", "fstats", "inspect", str(path)],
        capture_output=True,
        text=True,
        check=False,
    )
    assert done.returncode == 2
    assert "Traceback" not in done.stderr
    lines = done.stderr.strip().splitlines()
    assert len(lines) == 1, done.stderr
    assert str(blamed) in lines[0] and fragments[0] in lines[0]
