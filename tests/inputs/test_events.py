"""BIDS events.tsv: onsets, durations, conditions, amplitudes."""

import logging

import pytest
from numpy.testing import assert_array_equal

from fstats.errors import InputError
from fstats.inputs import read_events


def _write(tmp_path, text):
    path = tmp_path / "r_events.tsv"
    path.write_text(text)
    return path


def test_events_are_sorted_and_amplitudes_default_to_one(tmp_path):
    """Source: BIDS specification - onset and duration in seconds; n/a marks a missing value."""
    path = _write(
        tmp_path,
        "onset\tduration\ttrial_type\tamplitude\tresponse_time\n"
        "30\t5\tsubtract\tn/a\t1.2\n10\t0\tcue\t2.5\tn/a\n10\t5\tsubtract\t1\tn/a\n",
    )
    events = read_events(path)
    assert_array_equal(events.onsets_s, [10.0, 10.0, 30.0])
    assert events.conditions == ("cue", "subtract", "subtract")
    assert_array_equal(events.amplitudes, [2.5, 1.0, 1.0])
    assert_array_equal(events.durations_s, [0.0, 5.0, 5.0])
    assert events.source == str(path)


def test_modulator_column_is_read_as_amplitude(tmp_path):
    """Source: common practice - a parametric modulator scales each event's regressor."""
    path = _write(tmp_path, "onset\tduration\ttrial_type\tmodulator\n1\t1\tcue\t-0.5\n")
    assert_array_equal(read_events(path).amplitudes, [-0.5])
    both = _write(tmp_path, "onset\tduration\ttrial_type\tamplitude\tmodulator\n1\t1\tcue\t1\t2\n")
    with pytest.raises(InputError, match="at most one of the columns"):
        read_events(both)


def test_event_past_the_end_is_kept_with_a_warning(tmp_path, caplog, monkeypatch):
    """Source: common practice - a last block cut short by the end of recording is still usable."""
    monkeypatch.setattr(logging.getLogger("fstats"), "propagate", True)
    path = _write(tmp_path, "onset\tduration\ttrial_type\n50\t20\trecover\n")
    events = read_events(path, recording_duration_s=60.0)
    assert len(events) == 1
    assert any("past the end" in r.getMessage() for r in caplog.records)
    with pytest.raises(InputError, match="line 2, column 'onset'"):
        read_events(path, recording_duration_s=40.0)


def test_recording_start_offsets_the_end(tmp_path):
    """Source: common practice - onsets share the flow table's time base."""
    inside = _write(tmp_path, "onset\tduration\ttrial_type\n150\t10\tsubtract\n")
    assert len(read_events(inside, recording_duration_s=60.0, recording_start_s=100.0)) == 1
    after = _write(tmp_path, "onset\tduration\ttrial_type\n170\t1\tx\n")
    with pytest.raises(InputError, match=r"end of the recording \(160 s\)"):
        read_events(after, recording_duration_s=60.0, recording_start_s=100.0)


@pytest.mark.parametrize(
    ("text", "where"),
    [
        ("onset\tduration\ttrial_type\nabc\t1\tx\n", "line 2, column 'onset'"),
        ("onset\tduration\ttrial_type\n1\tn/a\tx\n", "line 2, column 'duration'"),
        ("onset\tduration\ttrial_type\n1\t1\tx\n2\t1\tn/a\n", "line 3, column 'trial_type'"),
        ("onset\tduration\ttrial_type\n1\t1\tx\n2\tinf\tx\n", "line 3, column 'duration'"),
    ],
)
def test_bad_cells_name_their_line(tmp_path, text, where):
    """Source: common practice - an error names the line and column of the bad cell."""
    with pytest.raises(InputError, match=where.replace("(", r"\(").replace(")", r"\)")):
        read_events(_write(tmp_path, text))


def test_header_only_gives_no_events(tmp_path):
    """Source: BIDS specification - an events file may list no events (e.g. rest)."""
    events = read_events(_write(tmp_path, "onset\tduration\ttrial_type\n"))
    assert len(events) == 0 and events.conditions == ()
