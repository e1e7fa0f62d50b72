"""Atomic writes (bench.files)."""

import errno
import os
import stat

import pytest

from bench.files import atomic_write_bytes, atomic_write_text


def test_atomic_write_replaces_whole_file_and_leaves_no_temporary(tmp_path):
    target = tmp_path / "sub" / "summary.csv"
    atomic_write_text(target, "first\n")
    atomic_write_text(target, "second\n")
    assert target.read_text() == "second\n"
    assert [p.name for p in target.parent.iterdir()] == ["summary.csv"]


def test_atomic_write_uses_ordinary_permissions(tmp_path):
    old = os.umask(0o022)
    try:
        path = atomic_write_bytes(tmp_path / "report.html", b"<html></html>")
    finally:
        os.umask(old)
    assert stat.S_IMODE(path.stat().st_mode) == 0o644


def test_a_failed_write_keeps_the_old_file_and_names_the_target(tmp_path, monkeypatch):
    target = tmp_path / "manifest.json"
    atomic_write_text(target, "old\n")

    def full(fd):
        raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))

    monkeypatch.setattr(os, "fsync", full)
    with pytest.raises(OSError) as info:
        atomic_write_text(target, "new\n")
    assert info.value.errno == errno.ENOSPC
    assert info.value.filename == str(target)  # not None, not the temporary file
    assert target.read_text() == "old\n"
    assert [p.name for p in tmp_path.iterdir()] == ["manifest.json"]
