"""Atomic writes: a failed write leaves the old file and no debris; modes follow the umask."""

from __future__ import annotations

import os
import stat

import pytest

from orthoclimb.fileio import write_atomic, write_json_atomic, write_text_atomic


def test_replaces_the_file_and_leaves_no_temporary(tmp_path):
    target = tmp_path / "sub" / "a.txt"
    write_text_atomic(target, "first")
    write_text_atomic(target, "second")
    assert target.read_text() == "second"
    assert sorted(p.name for p in target.parent.iterdir()) == ["a.txt"]


def test_a_failing_writer_keeps_the_old_content(tmp_path):
    target = tmp_path / "a.json"
    write_json_atomic(target, {"v": 1})

    def broken(fh):
        fh.write(b'{"v": 2, "half')
        raise RuntimeError("disk full")

    with pytest.raises(RuntimeError, match="disk full"):
        write_atomic(target, broken)
    assert target.read_text().strip().replace(" ", "").replace("\n", "") == '{"v":1}'
    assert sorted(p.name for p in tmp_path.iterdir()) == ["a.json"]


@pytest.mark.skipif(os.name != "posix", reason="POSIX permission bits")
@pytest.mark.parametrize("mask", [0o022, 0o077, 0o002])
def test_mode_follows_the_umask_like_open(tmp_path, mask):
    old = os.umask(mask)
    try:
        atomic = write_text_atomic(tmp_path / "atomic.txt", "x")
        plain = tmp_path / "plain.txt"
        with open(plain, "w") as fh:  # what a user expects a new file to look like
            fh.write("x")
    finally:
        os.umask(old)
    assert stat.S_IMODE(atomic.stat().st_mode) == stat.S_IMODE(plain.stat().st_mode)
