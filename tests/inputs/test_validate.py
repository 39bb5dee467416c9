"""Safe repairs at the boundary: duplicates, jitter, missing samples, NaN runs."""

import logging

import numpy as np
import pytest
from numpy.testing import assert_allclose, assert_array_equal

from fstats.errors import InputError, InputRepairWarning
from fstats.inputs import Channel, Recording, read_flow_table, write_flow_table
from fstats.inputs._validate import (
    JITTER_TOLERANCE,
    MAX_INTERPOLATED_GAP_S,
    clean_times,
    fill_missing,
    regular_grid,
)

CHANNELS = (Channel("scalp", 1.0, True), Channel("frontal_a", 3.0, False))


def _line_recording(times, fs=20.0):
    """Flow that is a straight line in time, so linear interpolation is exact."""
    flow = np.column_stack([1e-8 + 1e-10 * times, 2e-8 - 5e-11 * times])
    return Recording(times_s=times, flow=flow, channels=CHANNELS)


def _where(row):
    return f"line {row + 2}"


def test_exact_duplicate_rows_are_dropped_with_warning(tmp_path, build, caplog, monkeypatch):
    """Source: common practice - a repeated row carries no information; dropping it is safe."""
    monkeypatch.setattr(logging.getLogger("fstats"), "propagate", True)
    original = build(2)
    path = write_flow_table(original, tmp_path / "r_flow.tsv")
    lines = path.read_text().splitlines()
    lines.insert(10, lines[9])  # line 10 repeated as line 11
    lines.insert(500, lines[499])
    path.write_text("\n".join(lines) + "\n")
    with pytest.warns(InputRepairWarning, match="dropped 2 repeated row"):
        back = read_flow_table(path)
    assert_array_equal(back.flow, original.flow)
    assert_array_equal(back.times_s, original.times_s)
    assert back.provenance["repairs"][0]["kind"] == "duplicate_rows_dropped"
    assert "line 11" in back.provenance["repairs"][0]["message"]
    assert any("dropped 2 repeated" in r.getMessage() for r in caplog.records)
    assert all(r.levelno == logging.WARNING for r in caplog.records if "dropped" in r.message)


def test_small_jitter_is_snapped_onto_the_grid():
    """Source: closed form - linear interpolation of a straight line is exact."""
    rng = np.random.default_rng(4)
    grid = np.arange(400) / 20.0
    jitter = rng.uniform(-0.02, 0.02, grid.size) * 0.05  # up to 2 % of the 50 ms step
    jitter[[0, -1]] = 0.0
    times = grid + jitter
    values = np.column_stack([3.0 + 2.0 * times, -times])
    repairs = []
    with pytest.warns(InputRepairWarning, match="jitter"):
        new_times, new_values, rows = regular_grid(
            times, values, np.arange(times.size), path="f", where=_where, repairs=repairs
        )
    assert new_times[0] == 0.0
    assert_allclose(np.diff(new_times), np.diff(new_times)[0], rtol=1e-9)  # regular
    assert_allclose(new_times, grid, rtol=0, atol=0.05 * JITTER_TOLERANCE)
    assert_allclose(new_values[:, 0], 3.0 + 2.0 * new_times, rtol=1e-12)
    assert_allclose(new_values[:, 1], -new_times, atol=1e-12)
    assert_array_equal(rows, np.arange(times.size))
    assert 0.015 < repairs[0]["max_jitter_fraction"] < 0.025  # 2 % jitter + grid fit


def test_times_rounded_to_milliseconds_are_accepted(tmp_path):
    """Source: common practice - 30 Hz times written with 3 decimals are off by <= 0.5 ms."""
    times = np.round(np.arange(900) / 30.0, 3)
    recording = _line_recording(times)
    path = write_flow_table(recording, tmp_path / "ms_flow.tsv")
    with pytest.warns(InputRepairWarning, match="jitter"):
        back = read_flow_table(path)
    assert_allclose(np.diff(back.times_s), 1 / 30.0, rtol=1e-6)
    assert back.sfreq_hz == pytest.approx(30.0)


def test_jitter_beyond_tolerance_is_refused():
    """Source: common practice - a sample far from its grid point is not a rounding error."""
    times = np.arange(100) / 10.0
    times[50] += 0.4 * 0.1  # one sample 40 % of a step late: the step into it is refused
    with pytest.raises(InputError, match="line 52"):
        regular_grid(times, np.ones((100, 1)), np.arange(100), path="f", where=_where, repairs=[])
    assert JITTER_TOLERANCE == 0.05


def test_missing_samples_become_nan_and_short_gaps_are_interpolated(tmp_path):
    """Source: closed form - on a straight line, interpolation across a gap is exact."""
    times = np.arange(1200) / 20.0
    recording = _line_recording(times)
    keep = np.ones(times.size, dtype=bool)
    keep[200:205] = False  # 0.25 s gap: interpolated
    keep[600:680] = False  # 4 s gap: kept as NaN
    dropped = Recording(times_s=times[keep], flow=recording.flow[keep], channels=CHANNELS)
    path = write_flow_table(dropped, tmp_path / "gap_flow.tsv")
    with pytest.warns(InputRepairWarning):
        back = read_flow_table(path)
    assert_allclose(back.times_s, times, rtol=0, atol=1e-12)
    assert_allclose(back.flow[200:205], recording.flow[200:205], rtol=1e-12)
    assert np.isnan(back.flow[600:680]).all()
    assert not np.isnan(back.flow[:600]).any()
    runs = back.provenance["missing_samples"]
    assert list(runs) == ["scalp", "frontal_a"]
    assert_allclose(runs["scalp"], [[30.0, 34.0]], rtol=1e-12)
    assert_allclose(runs["frontal_a"], [[30.0, 34.0]], rtol=1e-12)
    kinds = [r["kind"] for r in back.provenance["repairs"]]
    assert "missing_samples_inserted" in kinds and "short_gaps_interpolated" in kinds


def test_nan_runs_short_interpolated_long_and_edge_kept():
    """Source: closed form - linear interpolation between the two neighbours of a gap."""
    times = np.arange(200) / 10.0
    values = np.column_stack([np.linspace(1.0, 2.0, 200)])
    values[0:2] = np.nan  # edge: kept
    values[50:55] = np.nan  # 0.5 s: interpolated (<= MAX_INTERPOLATED_GAP_S)
    values[100:106] = np.nan  # 0.6 s: kept
    with pytest.warns(InputRepairWarning, match="5 missing sample"):
        filled, kept = fill_missing(
            times, values, np.arange(200), ["c"], path="f", where=_where, repairs=[]
        )
    assert MAX_INTERPOLATED_GAP_S == 0.5
    assert_allclose(filled[50:55, 0], np.linspace(1.0, 2.0, 200)[50:55], rtol=1e-12)
    assert np.isnan(filled[0:2]).all() and np.isnan(filled[100:106]).all()
    assert list(kept) == ["c"]
    assert_allclose(kept["c"], [[0.0, 0.2], [10.0, 10.6]], rtol=1e-12)
    assert np.isnan(values[50:55]).all(), "input must not be modified"


def test_all_nan_channel_is_refused():
    """Source: common practice - a channel without data cannot be analysed."""
    times = np.arange(50) / 10.0
    values = np.column_stack([np.ones(50), np.full(50, np.nan)])
    with pytest.raises(InputError, match="column 'b'.*100% missing"):
        fill_missing(times, values, np.arange(50), ["a", "b"], path="f", where=_where, repairs=[])


def test_conflicting_duplicates_name_both_lines():
    """Source: common practice - two different values for one time cannot be reconciled."""
    times = np.array([0.0, 0.1, 0.1, 0.2])
    values = np.array([[1.0], [2.0], [2.5], [3.0]])
    with pytest.raises(InputError, match=r"line 4, column 'time'.*line 3"):
        clean_times(times, values, path="f", where=_where, repairs=[])


def test_relative_flow_is_accepted_with_units(tmp_path, build):
    """Source: common practice - relative flow has baseline 1 and no cm²/s unit."""
    recording = build(3)
    relative = Recording(
        times_s=recording.times_s,
        flow=recording.flow / 1e-8,
        channels=recording.channels,
        flow_unit="relative",
    )
    path = write_flow_table(relative, tmp_path / "rel_flow.tsv")
    back = read_flow_table(path)
    assert back.flow_unit == "relative"
    with pytest.raises(InputError, match="set units to 'cm2/s'"):
        read_flow_table(
            write_flow_table(recording, tmp_path / "abs_flow.tsv"), flow_unit="relative"
        )
