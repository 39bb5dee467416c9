"""The ``<stem>_flowmask.tsv`` sidecar: read into provenance["flow"]["masks"]["exclude"]."""

import dataclasses

import numpy as np
import pandas as pd
import pytest
from numpy.testing import assert_array_equal

from fstats.cli import main
from fstats.errors import InputError
from fstats.inputs import (
    read_flow_mask,
    read_flow_table,
    read_recording,
    read_snirf,
    write_flow_table,
    write_snirf,
)

STEM = "sub-01_task-subtract"


def _with_mask(build, seed=3):
    recording = build(seed)
    rng = np.random.default_rng(seed)
    exclude = rng.random(recording.flow.shape) < 0.1
    provenance = {"flow": {"masks": {"exclude": exclude}}}
    return dataclasses.replace(recording, provenance=provenance), exclude


def _written(tmp_path, build, suffix="tsv"):
    recording, exclude = _with_mask(build)
    path = write_flow_table(recording, tmp_path / f"{STEM}_flow.{suffix}")
    return path, tmp_path / f"{STEM}_flowmask.tsv", exclude


@pytest.mark.parametrize("suffix", ["tsv", "csv"])
def test_mask_round_trips_beside_a_flow_table(build, tmp_path, suffix):
    """Source: common practice - a sidecar written with a table reads back unchanged."""
    path, mask_path, exclude = _written(tmp_path, build, suffix)
    back = read_recording(path)
    got = back.provenance["flow"]["masks"]["exclude"]
    assert got.dtype == bool
    assert_array_equal(got, exclude)
    assert back.provenance["files"]["flowmask"] == str(mask_path)


def test_mask_round_trips_beside_a_snirf_file(build, tmp_path):
    """Source: common practice - a sidecar written with a file reads back unchanged."""
    recording, exclude = _with_mask(build)
    path = write_snirf(recording, tmp_path / f"{STEM}_dcs.snirf")
    mask_path = tmp_path / f"{STEM}_flowmask.tsv"
    reference = pd.read_csv(mask_path, sep="\t")[list(recording.channel_names)].to_numpy()
    assert_array_equal(reference == 1, exclude)
    back = read_snirf(path)
    assert_array_equal(back.provenance["flow"]["masks"]["exclude"], exclude)
    assert back.provenance["files"]["flowmask"] == str(mask_path)


def test_g2_only_snirf_ignores_a_mask_sidecar(build, tmp_path):
    """Source: CONTRACTS section 10 - masks of a g2-only file come from the flow fit."""
    recording, _ = _with_mask(build)
    unfitted = dataclasses.replace(
        build(3, g2=True), flow=np.full_like(recording.flow, np.nan), provenance={}
    )
    path = write_snirf(unfitted, tmp_path / f"{STEM}_dcs.snirf")
    write_flow_table(recording, tmp_path / f"{STEM}_flow.tsv")  # leaves a flowmask beside
    assert (tmp_path / f"{STEM}_flowmask.tsv").is_file()
    back = read_snirf(path)
    assert back.provenance["flow_missing"] is True
    assert "flow" not in back.provenance


def test_mask_columns_follow_channel_order(build, tmp_path):
    """Source: pandas.read_csv - the mask parsed by name must equal fstats' columns."""
    path, mask_path, exclude = _written(tmp_path, build)
    table = pd.read_csv(mask_path, sep="\t")
    table[["time", "frontal_b", "scalp", "frontal_a"]].to_csv(mask_path, sep="\t", index=False)
    back = read_flow_table(path)
    reference = pd.read_csv(mask_path, sep="\t")[list(back.channel_names)].to_numpy() == 1
    assert_array_equal(back.provenance["flow"]["masks"]["exclude"], reference)
    assert_array_equal(reference, exclude)


def test_no_mask_sidecar_means_no_flow_provenance(build, tmp_path):
    """Source: CONTRACTS section 1 - sidecars are optional and found by stem."""
    path = write_flow_table(build(1), tmp_path / f"{STEM}_flow.tsv")
    assert not (tmp_path / f"{STEM}_flowmask.tsv").exists()
    assert "flow" not in read_flow_table(path).provenance


def test_mask_of_wrong_shape_is_not_written(build, tmp_path):
    """Source: common practice - refuse before writing, so no half-written set of files."""
    recording = build(2)
    bad = dataclasses.replace(
        recording, provenance={"flow": {"masks": {"exclude": np.zeros((5, 3), bool)}}}
    )
    with pytest.raises(ValueError, match="exclude"):
        write_flow_table(bad, tmp_path / f"{STEM}_flow.tsv")
    with pytest.raises(ValueError, match="exclude"):
        write_snirf(bad, tmp_path / f"{STEM}_dcs.snirf")
    assert list(tmp_path.iterdir()) == []


def test_mask_file_is_not_taken_for_a_recording(build, tmp_path):
    """Source: CONTRACTS section 1 - the main data file is <stem>_flow.tsv, not a sidecar."""
    _, mask_path, _ = _written(tmp_path, build)
    with pytest.raises(InputError, match="flowmask sidecar"):
        read_recording(mask_path)


def _lines(path):
    return path.read_text().splitlines()


def _put(path, lines):
    path.write_text("\n".join(lines) + "\n")


def _set_cell(path, line, column, text):
    lines = _lines(path)
    cells = lines[line - 1].split("\t")
    cells[column] = text
    lines[line - 1] = "\t".join(cells)
    _put(path, lines)


# Each case breaks the mask of a valid flow table; returns fragments the message must hold.
def value_two(mask):
    _set_cell(mask, 8, 2, "2")
    return ["line 8, column 'frontal_a'", "0 (keep) or 1 (exclude)", "found 2.0"]


def value_missing(mask):
    _set_cell(mask, 15, 3, "n/a")
    return ["line 15, column 'frontal_b'", "a number", "'n/a'"]


def value_fraction(mask):
    _set_cell(mask, 30, 1, "0.5")
    return ["line 30, column 'scalp'", "0 (keep) or 1 (exclude)", "found 0.5"]


def misspelled_channel(mask):
    _put(mask, [_lines(mask)[0].replace("frontal_b", "frontal_bb"), *_lines(mask)[1:]])
    return ["line 1 (header)", "'time' and the flow table's channels", "did you mean 'frontal_b'"]


def missing_channel(mask):
    _put(mask, ["\t".join(line.split("\t")[:3]) for line in _lines(mask)])
    return ["line 1 (header)", "missing ['frontal_b']"]


def extra_row(mask):
    lines = _lines(mask)
    _put(mask, [*lines, "60.0\t0\t0\t0"])
    return [f"line {len(lines) + 1}", "1200 rows, one per flow sample", "1201 rows"]


def missing_rows(mask):
    lines = _lines(mask)
    _put(mask, lines[:-2])
    return [f"line {len(lines) - 1}", "1200 rows", "1198 rows"]


def shifted_time(mask):
    _set_cell(mask, 101, 0, "7.5")  # row 100 of the flow is at 4.95 s
    return ["line 101, column 'time'", "flow sample time 4.95 s", "7.5"]


def non_numeric_time(mask):
    _set_cell(mask, 4, 0, "t3")
    return ["line 4, column 'time'", "a number"]


MASK_CASES = [
    value_two,
    value_missing,
    value_fraction,
    misspelled_channel,
    missing_channel,
    extra_row,
    missing_rows,
    shifted_time,
    non_numeric_time,
]


@pytest.mark.parametrize("case", MASK_CASES, ids=lambda c: c.__name__)
def test_malformed_mask_is_refused_naming_line_and_column(case, build, tmp_path):
    """Source: common practice - an input error says which file, where, expected and found."""
    path, mask_path, _ = _written(tmp_path, build)
    fragments = case(mask_path)
    with pytest.raises(InputError) as caught:
        read_flow_table(path)
    message = str(caught.value)
    assert "\n" not in message
    assert message.startswith(f"{mask_path}, "), message
    for fragment in fragments:
        assert fragment in message, f"{fragment!r} not in {message!r}"


@pytest.mark.parametrize("case", [value_two, shifted_time], ids=lambda c: c.__name__)
def test_malformed_mask_through_the_command_line(case, build, tmp_path, capsys):
    """Source: issue acceptance - exit code 2, one line on stderr naming the mask file."""
    path, mask_path, _ = _written(tmp_path, build)
    fragments = case(mask_path)
    code = main(["inspect", str(path)])
    captured = capsys.readouterr()
    assert code == 2
    lines = captured.err.strip().splitlines()
    assert len(lines) == 1, captured.err
    assert lines[0].startswith(f"fstats inspect: error: {mask_path}, ")
    assert fragments[0] in lines[0]
    assert "Traceback" not in captured.err + captured.out


def test_read_flow_mask_directly(build, tmp_path):
    """Source: pandas.read_csv - the same 0/1 cells parsed by a reference reader."""
    path, mask_path, _ = _written(tmp_path, build)
    recording = read_flow_table(path)
    reference = pd.read_csv(mask_path, sep="\t")
    order = ("frontal_a", "scalp", "frontal_b")
    got = read_flow_mask(mask_path, recording.times_s, order)
    assert got.shape == (recording.n_times, 3)
    assert_array_equal(reference["time"].to_numpy(), recording.times_s)
    assert_array_equal(got, reference[list(order)].to_numpy() == 1)
