"""Cohort folders: participants.tsv and sub-*/ recordings."""

import numpy as np
import pandas as pd
import pytest

from fstats.errors import InputError
from fstats.inputs import (
    find_recordings,
    read_cohort,
    read_participants,
    read_recording,
    write_flow_table,
    write_snirf,
)


def _cohort(tmp_path, build):
    write_flow_table(
        build(1, subject="sub-01"), tmp_path / "sub-01" / "sub-01_task-subtract_flow.tsv"
    )
    write_flow_table(
        build(2, subject="sub-02"), tmp_path / "sub-02" / "sub-02_task-subtract_run-1_flow.csv"
    )
    write_snirf(
        build(3, subject="sub-02"), tmp_path / "sub-02" / "sub-02_task-subtract_run-2_dcs.snirf"
    )
    write_snirf(
        build(4, subject="sub-03"),
        tmp_path / "sub-03" / "ses-a" / "sub-03_ses-a_task-cue_dcs.snirf",
    )
    (tmp_path / "participants.tsv").write_text(
        "participant_id\tgroup\tage\tsex\nsub-01\tyounger\t24\tF\nsub-02\tolder\tn/a\tM\n"
        "sub-03\tolder\t71\tn/a\n"
    )
    return tmp_path


def test_find_recordings_lists_every_data_file(tmp_path, build):
    """Source: CONTRACTS section 1 - one folder per participant, stems before the data suffix."""
    root = _cohort(tmp_path, build)
    entries = find_recordings(root)
    assert [(e.participant_id, e.stem, e.session) for e in entries] == [
        ("sub-01", "sub-01_task-subtract", None),
        ("sub-02", "sub-02_task-subtract_run-1", "run-1"),
        ("sub-02", "sub-02_task-subtract_run-2", "run-2"),
        ("sub-03", "sub-03_ses-a_task-cue", "ses-a"),
    ]
    assert entries[2].path.name.endswith("_dcs.snirf")
    recording = read_recording(entries[1].path)
    assert (recording.subject, recording.session) == ("sub-02", "run-1")


def test_read_cohort_reads_participants(tmp_path, build):
    """Source: BIDS specification - participants.tsv, participant_id first, n/a for missing."""
    cohort = read_cohort(_cohort(tmp_path, build))
    table = cohort.participants
    assert list(table.columns) == ["participant_id", "group", "age", "sex"]
    assert pd.api.types.is_numeric_dtype(table["age"])
    assert np.isnan(table.loc[1, "age"]) and table.loc[2, "age"] == 71
    assert pd.isna(table.loc[2, "sex"])
    assert len(cohort.for_participant("sub-02")) == 2
    assert list(table.index) == [0, 1, 2]


def test_flow_table_preferred_over_snirf_for_one_stem(tmp_path, build):
    """Source: CONTRACTS section 1 - a stem names one recording, whatever its container."""
    recording = build(5)
    write_flow_table(recording, tmp_path / "sub-01" / "sub-01_task-subtract_flow.tsv")
    write_snirf(recording, tmp_path / "sub-01" / "sub-01_task-subtract_dcs.snirf")
    (entry,) = find_recordings(tmp_path)
    assert entry.path.name == "sub-01_task-subtract_flow.tsv"


def test_cohort_without_participants_table_uses_folders(tmp_path, build):
    """Source: common practice - the folders still identify the participants."""
    write_flow_table(build(1), tmp_path / "sub-07" / "sub-07_task-subtract_flow.tsv")
    cohort = read_cohort(tmp_path)
    assert list(cohort.participants["participant_id"]) == ["sub-07"]


@pytest.mark.parametrize(
    ("text", "where"),
    [
        ("participant\tgroup\nsub-01\ta\n", "line 1 (header)"),
        ("participant_id\tgroup\n01\ta\n", "line 2, column 'participant_id'"),
        ("participant_id\tgroup\nsub-01\ta\nsub-01\tb\n", "line 3, column 'participant_id'"),
    ],
)
def test_bad_participants_table(tmp_path, text, where):
    """Source: BIDS specification - participant_id values are unique 'sub-<label>'."""
    path = tmp_path / "participants.tsv"
    path.write_text(text)
    with pytest.raises(InputError, match=where.replace("(", r"\(").replace(")", r"\)")):
        read_participants(path)


def test_misplaced_file_and_empty_folder_are_refused(tmp_path, build):
    """Source: common practice - a file in the wrong participant's folder is a mistake."""
    write_flow_table(build(1), tmp_path / "sub-01" / "sub-02_task-subtract_flow.tsv")
    with pytest.raises(InputError, match="file name: .*folder's id 'sub-01_'"):
        find_recordings(tmp_path)
    empty = tmp_path / "empty"
    empty.mkdir()
    with pytest.raises(InputError, match="no recordings"):
        read_cohort(empty)
