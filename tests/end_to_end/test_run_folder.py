"""A run folder that stops taking writes (a full disk, a read-only file system): the run
stops with a message naming the file and the fix, exit status 2, the manifest says
"stopped" when it can still be written, every stored sweep is kept and the run resumes."""

from __future__ import annotations

import errno
import json
import os
from pathlib import Path

import pytest

import bench.files
import bench.runstore
from bench.cli import main
from bench.errors import RunFolderError
from bench.runstore import STOPPED

REAL_WRITE = bench.files.atomic_write_bytes


class FullDisk:
    """``atomic_write_bytes`` that fails with ENOSPC from the ``after``-th raw sweep on:
    once (space freed at once by someone), or for every later write (the disk stays full)."""

    def __init__(self, after: int, *, stays_full: bool):
        self.after = after
        self.stays_full = stays_full
        self.raw_writes = 0
        self.failed: list[Path] = []

    def __call__(self, path, data):
        target = Path(path)
        if target.parent.name == "raw":
            self.raw_writes += 1
        full = self.raw_writes >= self.after and (self.stays_full or not self.failed)
        if full:
            self.failed.append(target)
            # As bench.files reports it: the file that could not be saved.
            raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC), str(target))
        return REAL_WRITE(path, data)


def _manifest(root: Path) -> dict:
    return json.loads((root / "manifest.json").read_text(encoding="utf-8"))


def test_a_full_disk_stops_the_run_with_exit_2_and_it_resumes(tmp_path, kit, monkeypatch, capsys):
    path = kit.write_procedure(tmp_path, kit.SMALL)
    out = tmp_path / "runs"
    disk = FullDisk(after=5, stays_full=True)  # cal_through and three shorts stored first
    monkeypatch.setattr(bench.files, "atomic_write_bytes", disk)
    sim = ["--sim", "--time-scale", str(kit.TIME_SCALE), "--quiet"]
    code = main(["run", str(path), "--out", str(out), *sim])
    err = capsys.readouterr().err
    assert code == 2, err
    assert "Traceback" not in err
    (root,) = [p for p in out.iterdir() if not p.is_symlink()]  # beside last-calibration
    assert f"cannot write {disk.failed[0]}" in err
    assert "No space left on device" in err
    assert "free space on the disk" in err
    assert f"zbench run --resume {root}" in err
    # The manifest on disk is the last one written whole; the sweeps it lists are there.
    manifest = _manifest(root)
    listed = [f for step in manifest["steps"] for f in step.get("files", [])]
    assert sorted(listed) == sorted(f"raw/{p.name}" for p in (root / "raw").glob("*.s2p"))
    assert len(listed) == 4
    assert not list(root.rglob("*.tmp")), "a temporary file was left behind"
    kept = {p.name: p.read_bytes() for p in (root / "raw").glob("*.s2p")}

    monkeypatch.setattr(bench.files, "atomic_write_bytes", REAL_WRITE)  # space freed
    code = main(["run", "--resume", str(root), *sim])
    assert code == 0, capsys.readouterr().err
    manifest = _manifest(root)
    assert manifest["state"] == "complete"
    after = {p.name: p.read_bytes() for p in (root / "raw").glob("*.s2p")}
    assert len(after) == 7
    assert all(after[name] == data for name, data in kept.items()), "a stored sweep changed"


def test_stopped_is_recorded_and_a_read_only_folder_is_refused(tmp_path, sim, kit, monkeypatch):
    plan, store = kit.start_run(tmp_path, kit.SMALL)
    disk = FullDisk(after=6, stays_full=False)
    monkeypatch.setattr(bench.files, "atomic_write_bytes", disk)
    with pytest.raises(RunFolderError) as info:
        kit.run_on(sim, plan, store)
    assert info.value.exit_code == 2
    assert len(disk.failed) == 1
    plan2, store2 = kit.reopen(store)
    # The disk took writes again at once: the manifest records the stop and its reason.
    assert store2.manifest["state"] == "stopped"
    assert "No space left on device" in store2.manifest["stop_message"]
    stopped = [s for s in store2.manifest["steps"] if s["state"] == STOPPED]
    assert [s["id"] for s in stopped] == [store2.first_incomplete()]
    assert str(disk.failed[0]) in stopped[0]["message"]
    kept = kit.raw_files(store2)
    assert len(kept) == 5

    # Resumed on a file system mounted read-only: refused before any step, nothing changed.
    monkeypatch.setattr(bench.files, "atomic_write_bytes", REAL_WRITE)
    before = (store2.root / "manifest.json").read_bytes()
    real_mkstemp = bench.files.tempfile.mkstemp

    def read_only(*args, **kwargs):
        folder = Path(kwargs.get("dir") or ".").resolve()
        if folder == store2.root.resolve() or store2.root.resolve() in folder.parents:
            # As os.open reports it: the temporary file's name.
            temporary = folder / f"{kwargs['prefix']}k2x9q{kwargs['suffix']}"
            raise OSError(errno.EROFS, os.strerror(errno.EROFS), str(temporary))
        return real_mkstemp(*args, **kwargs)

    monkeypatch.setattr(bench.files.tempfile, "mkstemp", read_only)
    with pytest.raises(RunFolderError) as info:
        kit.run_on(sim, plan2, store2)
    message = str(info.value)
    # bench.files names the file being saved, not its temporary.
    assert f"cannot write {store2.root / 'manifest.json'}" in message
    assert "read-only" in message
    assert f"zbench run --resume {store2.root}" in message
    assert (store2.root / "manifest.json").read_bytes() == before
    assert kit.raw_files(store2) == kept

    monkeypatch.setattr(bench.files.tempfile, "mkstemp", real_mkstemp)
    plan3, store3 = kit.reopen(store2)
    kit.run_on(sim, plan3, store3)
    assert store3.manifest["state"] == "complete"
    after = kit.raw_files(store3)
    assert len(after) == 7
    assert all(after[name] == data for name, data in kept.items()), "a stored sweep changed"


def test_a_read_only_output_folder_is_refused_with_exit_2(tmp_path, kit, monkeypatch, capsys):
    path = kit.write_procedure(tmp_path, kit.SMALL)
    out = tmp_path / "runs"

    def read_only(cls, root, **kwargs):
        raise OSError(errno.EROFS, os.strerror(errno.EROFS), str(root))

    monkeypatch.setattr(bench.runstore.RunStore, "create", classmethod(read_only))
    code = main(["run", str(path), "--sim", "--out", str(out), "--quiet"])
    err = capsys.readouterr().err
    assert code == 2, err
    assert "Traceback" not in err
    assert f"{out}: cannot make the run folder: Read-only file system" in err
    assert "give another folder with --out" in err
