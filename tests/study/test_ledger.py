"""Tests of fstats/study/ledger.py: hashes, atomic writes, moving folders into place."""

import hashlib
import os

import pytest

from fstats.study.ledger import (
    file_sha256,
    move_into_place,
    options_key,
    read_marker,
    remove_leftovers,
    write_json_atomic,
    write_text_atomic,
)


def test_file_sha256_matches_published_test_vector(tmp_path):
    """Source: FIPS 180-2, appendix B.1 - SHA-256("abc") test vector."""
    path = tmp_path / "abc.txt"
    path.write_bytes(b"abc")
    assert file_sha256(path) == "ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad"


def test_file_sha256_reads_in_chunks_like_hashlib(tmp_path):
    """Source: Python hashlib (reference implementation) on a file larger than one chunk."""
    data = os.urandom(3 * (1 << 20) + 17)
    path = tmp_path / "big.bin"
    path.write_bytes(data)
    assert file_sha256(path) == hashlib.sha256(data).hexdigest()


def test_options_key_depends_on_every_input_and_option_but_not_order():
    """Source: common practice - a cache key must change with any input and ignore dict order."""
    inputs = {"a_flow.tsv": "11", "a_events.tsv": "22"}
    options = {"design_sha256": "33", "fit": {"method": "ols"}, "fstats_version": "0.1.0"}
    key = options_key(inputs, options)
    assert key == options_key(dict(reversed(inputs.items())), dict(reversed(options.items())))
    assert key != options_key({**inputs, "a_events.tsv": "23"}, options)
    assert key != options_key(inputs, {**options, "fit": {"method": "ar-irls"}})
    assert key != options_key(inputs, {**options, "fstats_version": "0.2.0"})


def test_atomic_write_keeps_old_file_when_interrupted(tmp_path, monkeypatch):
    """Source: common practice - write to a temporary name, fsync, then rename (POSIX rename)."""
    target = tmp_path / "table.tsv"
    write_text_atomic(target, "old\n")

    def broken_fsync(fd):
        raise OSError("disk full")

    monkeypatch.setattr(os, "fsync", broken_fsync)
    with pytest.raises(OSError, match="disk full"):
        write_text_atomic(target, "new and longer\n")
    assert target.read_text() == "old\n"
    assert sorted(p.name for p in tmp_path.iterdir()) == ["table.tsv"]


def test_json_marker_round_trip_and_unreadable_marker(tmp_path):
    """Source: common practice - a damaged marker counts as no marker."""
    write_json_atomic(tmp_path / "done.json", {"key": "abc", "files": {"results": "x.tsv"}})
    assert read_marker(tmp_path) == {"key": "abc", "files": {"results": "x.tsv"}}
    (tmp_path / "done.json").write_text('{"key": "ab')  # truncated
    assert read_marker(tmp_path) is None
    assert read_marker(tmp_path / "missing") is None
    assert read_marker(tmp_path, "absent.json") is None


def test_move_into_place_replaces_the_whole_folder(tmp_path):
    """Source: common practice - no file of the old folder survives the replacement."""
    final = tmp_path / "sub-01"
    final.mkdir()
    (final / "stale.tsv").write_text("old")
    work = tmp_path / ".work-sub-01-abc"
    work.mkdir()
    (work / "fresh.tsv").write_text("new")
    move_into_place(work, final)
    assert sorted(p.name for p in final.iterdir()) == ["fresh.tsv"]
    assert sorted(p.name for p in tmp_path.iterdir()) == ["sub-01"]


def test_remove_leftovers_deletes_only_unfinished_work(tmp_path):
    """Source: common practice - resume removes work folders of a killed run, nothing else."""
    for name in (".work-sub-01-1234", ".old-sub-02-5678", "sub-03"):
        (tmp_path / name).mkdir()
    (tmp_path / ".subjects.tsv.x1.tmp").write_text("half")
    assert remove_leftovers([tmp_path, tmp_path / "missing"]) == 3
    assert sorted(p.name for p in tmp_path.iterdir()) == ["sub-03"]
