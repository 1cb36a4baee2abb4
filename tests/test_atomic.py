"""Crash-safe writes (specproc._atomic): the contract of DESIGN.md, "all file writes go through a
temp-file-and-rename so a crash never leaves half a file"; permissions as POSIX creat() with the
process umask would give (0o666 & ~umask)."""

import os
import stat

import pytest

from specproc._atomic import atomic_path, write_text


def _umask() -> int:
    mask = os.umask(0o022)
    os.umask(mask)
    return mask


def test_written_file_has_umask_permissions(tmp_path):
    target = tmp_path / "out.txt"
    write_text(target, "hello")
    assert target.read_text() == "hello"
    assert stat.S_IMODE(target.stat().st_mode) == 0o666 & ~_umask()


def test_error_leaves_neither_target_nor_temporary(tmp_path):
    target = tmp_path / "result.nii.gz"
    with pytest.raises(RuntimeError), atomic_path(target) as tmp:
        assert tmp.name.endswith(".nii.gz")  # suffix kept for libraries that dispatch on it
        tmp.write_bytes(b"half a file")
        raise RuntimeError("crash while writing")
    assert list(tmp_path.iterdir()) == []


def test_error_keeps_the_previous_file(tmp_path):
    target = tmp_path / "results.tsv"
    target.write_text("old")
    with pytest.raises(RuntimeError), atomic_path(target) as tmp:
        tmp.write_text("new, unfinished")
        raise RuntimeError("crash")
    assert target.read_text() == "old"
    assert [p.name for p in tmp_path.iterdir()] == ["results.tsv"]
