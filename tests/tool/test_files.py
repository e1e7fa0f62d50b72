"""Atomic writes (bench.files)."""

import os
import stat

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
