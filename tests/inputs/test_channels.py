"""The channel sidecar: short-separation threshold, explicit roles, units."""

import pytest

from fstats.errors import InputError
from fstats.inputs import SHORT_SEPARATION_THRESHOLD_CM, read_channels
from fstats.inputs.channels import read_channel_table


def _write(tmp_path, text):
    path = tmp_path / "r_channels.tsv"
    path.write_text(text)
    return path


def test_short_channels_follow_the_threshold(tmp_path):
    """Source: common practice - DCS scalp channels 0.5-1.5 cm, brain channels 2.5-4 cm."""
    path = _write(tmp_path, "name\tseparation_cm\na\t0.8\nb\t1.5\nc\t2.5\nd\t3.0\n")
    channels = read_channels(path)
    assert SHORT_SEPARATION_THRESHOLD_CM == 1.5
    assert [c.is_short for c in channels] == [True, True, False, False]
    assert [c.is_short for c in read_channels(path, short_threshold_cm=1.0)] == [
        True,
        False,
        False,
        False,
    ]
    assert [c.separation_cm for c in channels] == [0.8, 1.5, 2.5, 3.0]
    assert all(c.wavelength_nm is None for c in channels)


def test_explicit_role_wins_over_the_threshold(tmp_path):
    """Source: CONTRACTS section 1 - the role column, when given, decides."""
    path = _write(
        tmp_path,
        "name\tseparation_cm\trole\twavelength_nm\na\t2.0\tshort\t785\nb\t1.0\tlong\tn/a\n"
        "c\t1.0\tn/a\t850\n",
    )
    a, b, c = read_channels(path)
    assert (a.is_short, b.is_short, c.is_short) == (True, False, True)
    assert (a.wavelength_nm, b.wavelength_nm, c.wavelength_nm) == (785.0, None, 850.0)


def test_units_column_is_returned(tmp_path):
    """Source: CONTRACTS section 1 - units cm2/s or relative, one per recording."""
    path = _write(tmp_path, "name\tseparation_cm\tunits\na\t1\trelative\nb\t3\trelative\n")
    assert read_channel_table(path)[1] == "relative"
    mixed = _write(tmp_path, "name\tseparation_cm\tunits\na\t1\trelative\nb\t3\tcm2/s\n")
    with pytest.raises(InputError, match="column 'units'.*same flow unit"):
        read_channel_table(mixed)


def test_duplicated_channel_names_are_refused(tmp_path):
    """Source: common practice - a name must identify one flow column."""
    path = _write(tmp_path, "name\tseparation_cm\na\t1\na\t3\n")
    with pytest.raises(InputError, match="line 3, column 'name'.*already on line 2"):
        read_channels(path)


def test_missing_separation_column_suggests_the_name(tmp_path):
    """Source: common practice - a 'did you mean' hint for a near-miss column name."""
    path = _write(tmp_path, "name\tseparation_mm\na\t10\n")
    with pytest.raises(InputError, match="'separation_cm'.*did you mean 'separation_mm'"):
        read_channels(path)
