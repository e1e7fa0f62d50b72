"""The run folder: one per run, written so a crash never loses a stored sweep.

Layout::

    <run>/manifest.json   resolved procedure, instruments, calibration, software version,
                          each step's state and times
    <run>/procedure.yaml  the procedure text as run (resume and reprocess re-read it)
    <run>/raw/*.s2p       every raw sweep, written the moment it is read
    <run>/corrected/      calibrated data; <run>/models/ fitted models
    <run>/summary.csv, report.html, plots/   exports and report
    <run>/log             a plain-text log, one line per event

Every file except the log is written atomically (:mod:`bench.files`); the manifest is
rewritten after each step, so the first step not marked ``done`` is where a resumed run
starts.
"""

from __future__ import annotations

import datetime as _dt
import hashlib
import json
import re
import shutil
from pathlib import Path
from typing import Any

import numpy as np

from bench import __version__
from bench.errors import InputError
from bench.files import atomic_write_text

MANIFEST = "manifest.json"
PROCEDURE_COPY = "procedure.yaml"
FORMAT_VERSION = 1
DONE, PENDING, RUNNING, FAILED, SKIPPED = "done", "pending", "running", "failed", "skipped"
#: A step the operator stopped (or interrupted with Ctrl-C): not a failure; it resumes.
STOPPED = "stopped"


def now_iso() -> str:
    """The current UTC time, ISO 8601 with seconds."""
    return _dt.datetime.now(_dt.timezone.utc).isoformat(timespec="milliseconds")


def parse_iso(text: str) -> _dt.datetime:
    return _dt.datetime.fromisoformat(text)


# Name of the link, beside the run folders, to the newest run with a complete calibration.
LAST_CALIBRATION = "last-calibration"

# Raw-file prefix per step kind; a part's sweeps are named by the part alone.
_STEM_PREFIXES = {"measure": "", "calibrate": "cal", "mount_short": "short", "mount_open": "open"}


def file_stem(step_id: str) -> str:
    """A file-name stem for a step id: ``measure/MC22-6V3/s1/0V`` -> ``MC22-6V3_s1_0V``."""
    kind, *rest = step_id.split("/")
    prefix = _STEM_PREFIXES.get(kind, kind)
    parts = [prefix, *rest] if prefix else rest
    return re.sub(r"[^A-Za-z0-9._-]", "_", "_".join(parts))


def plan_digest(resolved: dict[str, Any]) -> str:
    """A digest of the resolved plan (SI values, every setting; not the file's path).

    A resume compares it with the plan rebuilt from the run folder's ``procedure.yaml``,
    so an edit there (fewer points, another current limit) is found, not silently used.
    """
    plain = {k: v for k, v in resolved.items() if k != "source"}
    text = json.dumps(plain, sort_keys=True, separators=(",", ":"), default=str)
    return "sha256:" + hashlib.sha256(text.encode("utf-8")).hexdigest()


def changed_keys(old: Any, new: Any, prefix: str = "") -> list[str]:
    """Dotted keys whose values differ between two resolved plans."""
    if isinstance(old, dict) and isinstance(new, dict):
        keys: list[str] = []
        for key in sorted(set(old) | set(new), key=str):
            if key == "source" and not prefix:
                continue
            name = f"{prefix}.{key}" if prefix else str(key)
            keys += changed_keys(old.get(key), new.get(key), name)
        return keys
    if isinstance(old, tuple | list) and isinstance(new, tuple | list) and len(old) == len(new):
        keys = []
        for i, (a, b) in enumerate(zip(old, new, strict=True)):
            keys += changed_keys(a, b, f"{prefix}[{i}]")
        return keys
    return [] if old == new else [prefix or "<plan>"]


#: Largest manifest read back (a run of thousands of steps stays far below it).
MAX_MANIFEST_BYTES = 50_000_000


def _manifest_shape_ok(manifest: Any) -> bool:
    """A mapping whose steps each have an id, a state and files inside the run folder."""
    if not isinstance(manifest, dict) or not isinstance(manifest.get("steps"), list):
        return False
    for entry in manifest["steps"]:
        if not isinstance(entry, dict) or not isinstance(entry.get("id"), str):
            return False
        files = entry.get("files", [])
        if not isinstance(files, list) or not all(_inside_run(f) for f in files):
            return False
    return isinstance(manifest.get("procedure", {}), dict)


def _inside_run(relative: Any) -> bool:
    """A relative path that stays inside the run folder (no '..', not absolute)."""
    if not isinstance(relative, str) or not relative:
        return False
    path = Path(relative)
    return not path.is_absolute() and ".." not in path.parts


class RunStore:
    """A run folder and its manifest. Create with :meth:`create`, reopen with :meth:`open`."""

    def __init__(self, root: Path, manifest: dict[str, Any]):
        self.root = Path(root)
        self.manifest = manifest

    # -- creation -------------------------------------------------------------------

    @classmethod
    def create(
        cls,
        out_dir: str | Path,
        *,
        plan_name: str,
        resolved: dict[str, Any],
        procedure_text: str,
        step_ids: list[tuple[str, str]],
    ) -> RunStore:
        """Make a new run folder under ``out_dir`` named ``<UTC time>-<plan name>``."""
        out = Path(out_dir)
        stamp = _dt.datetime.now(_dt.timezone.utc).strftime("%Y%m%d-%H%M%S")
        root = out / f"{stamp}-{plan_name}"
        n = 1
        while root.exists():
            n += 1
            root = out / f"{stamp}-{plan_name}-{n}"
        for sub in ("raw", "corrected", "models", "plots"):
            (root / sub).mkdir(parents=True, exist_ok=True)
        manifest = {
            "format": FORMAT_VERSION,
            "run_id": root.name,
            "created": now_iso(),
            "software_version": __version__,
            "state": "created",
            "procedure": resolved,
            "plan_digest": plan_digest(resolved),
            "procedure_file": PROCEDURE_COPY,
            "instruments": {},
            "calibration": {},
            "ground_loop": {},
            "warnings": [],
            "steps": [
                {"id": sid, "kind": kind, "state": PENDING, "files": []} for sid, kind in step_ids
            ],
            "sessions": [],
        }
        atomic_write_text(root / PROCEDURE_COPY, procedure_text)
        store = cls(root, manifest)
        store.save()
        return store

    @classmethod
    def open(cls, run_dir: str | Path) -> RunStore:
        """Reopen an existing run folder (for resume, reprocess or report)."""
        root = Path(run_dir)
        path = root / MANIFEST
        if not path.is_file():
            raise InputError(
                "not a run folder (no manifest.json)",
                path=str(root),
                hint="give a folder that zbench run or zbench demo created",
            )
        try:
            with path.open("rb") as handle:
                data = handle.read(MAX_MANIFEST_BYTES + 1)
            if len(data) > MAX_MANIFEST_BYTES:
                raise ValueError("larger than a run's manifest can be")
            manifest = json.loads(data.decode("utf-8"))
        except json.JSONDecodeError as exc:
            raise InputError(
                f"manifest.json is not valid JSON ({exc.msg}, line {exc.lineno})",
                path=str(path),
                hint="restore the manifest from a backup; the raw sweeps are untouched",
            ) from None
        except (OSError, ValueError, RecursionError) as exc:
            # Never the file's text in the message: the folder may be any folder.
            reason = "nested too deeply" if isinstance(exc, RecursionError) else type(exc).__name__
            raise InputError(
                f"manifest.json cannot be read as a zbench manifest ({reason})",
                path=str(path),
                hint="give a folder that zbench run or zbench demo created",
            ) from None
        if not _manifest_shape_ok(manifest):
            raise InputError(
                "manifest.json is not a zbench run manifest",
                path=str(path),
                hint="give a folder that zbench run or zbench demo created",
            )
        if manifest.get("format") != FORMAT_VERSION:
            raise InputError(
                f"run format {manifest.get('format')!r} is not {FORMAT_VERSION}",
                path=str(path),
                hint="open it with the zbench version that wrote it",
            )
        return cls(root, manifest)

    # -- manifest -------------------------------------------------------------------

    @property
    def run_id(self) -> str:
        return str(self.manifest["run_id"])

    def save(self) -> None:
        """Write the manifest atomically."""
        text = json.dumps(self.manifest, indent=2, default=_json_default)
        atomic_write_text(self.root / MANIFEST, text + "\n")

    def procedure_text(self) -> str:
        return (self.root / PROCEDURE_COPY).read_text(encoding="utf-8")

    def _step(self, step_id: str) -> dict[str, Any]:
        for entry in self.manifest["steps"]:
            if entry["id"] == step_id:
                return entry
        raise KeyError(step_id)

    def step_state(self, step_id: str) -> str:
        return str(self._step(step_id)["state"])

    def step_files(self, step_id: str) -> list[str]:
        return list(self._step(step_id)["files"])

    def step_info(self, step_id: str) -> dict[str, Any]:
        return dict(self._step(step_id))

    def mark(self, step_id: str, state: str, *, message: str | None = None, **info: Any) -> None:
        """Record a step's state (and time) in the manifest, and save it."""
        entry = self._step(step_id)
        entry["state"] = state
        stamp = now_iso()
        if state == RUNNING:
            entry.setdefault("started", stamp)
        else:
            entry["finished"] = stamp
        if message is not None:
            entry["message"] = message
        elif state == DONE:
            entry.pop("message", None)
        entry.update(info)
        # "running" need not reach the disk at once: a crash before the next save leaves
        # the step "pending", which resumes the same way; sweeps are listed as written.
        if state != RUNNING:
            self.save()

    def first_incomplete(self) -> str | None:
        """Id of the first step that is not done or skipped, or None when all are."""
        for entry in self.manifest["steps"]:
            if entry["state"] not in (DONE, SKIPPED):
                return str(entry["id"])
        return None

    def set_state(self, state: str, message: str | None = None) -> None:
        self.manifest["state"] = state
        if message is not None:
            self.manifest["stop_message"] = message
        elif state in ("running", "complete"):
            self.manifest.pop("stop_message", None)
        self.save()

    def update(self, key: str, value: Any) -> None:
        """Set a top-level manifest entry (instruments, calibration, ground_loop ...)."""
        self.manifest[key] = value
        self.save()

    def begin_session(self, how: str) -> None:
        self.manifest["sessions"].append({"started": now_iso(), "how": how})
        self.manifest["state"] = "running"
        self.save()

    # -- data -----------------------------------------------------------------------

    def raw_path(self, name: str) -> Path:
        return self.root / "raw" / f"{name}.s2p"

    def write_raw(
        self,
        step_id: str,
        name: str,
        f: np.ndarray,
        s: np.ndarray,
        *,
        z0: float = 50.0,
        comments: tuple[str, ...] = (),
        save: bool = True,
    ) -> Path:
        """Write one raw sweep ``raw/<name>.s2p`` at once and list it under ``step_id``.

        With ``save=False`` the manifest is saved by the caller's next :meth:`mark`; a
        sweep written but not yet listed is found again by :meth:`adopt_raw` on resume.
        """
        from bench.touchstone import write_touchstone_s

        path = self.raw_path(name)
        s = np.asarray(s, dtype=complex)
        # Traces the analyser was not asked for come back NaN; Touchstone needs numbers.
        s = np.where(np.isfinite(s), s, 0.0)
        header = (f"zbench run {self.run_id}, step {step_id}", f"read {now_iso()}", *comments)
        write_touchstone_s(path, f, s, z0=z0, comments=header)
        entry = self._step(step_id)
        relative = str(path.relative_to(self.root))
        if relative not in entry["files"]:
            entry["files"].append(relative)
        if save:
            self.save()
        return path

    def adopt_raw(self, step_id: str, name: str) -> bool:
        """List ``raw/<name>.s2p`` under ``step_id`` if it is on disk; True if it is.

        Raw files are written atomically, so one that exists is complete, even if a crash
        came before the manifest listed it.
        """
        path = self.raw_path(name)
        if not path.is_file():
            return False
        entry = self._step(step_id)
        relative = str(path.relative_to(self.root))
        if relative not in entry["files"]:
            entry["files"].append(relative)
            self.save()
        return True

    def reject_raw(self, step_id: str, name: str) -> Path | None:
        """Move a sweep the operator chose to repeat into ``raw/rejected/`` (never delete)."""
        path = self.raw_path(name)
        if not path.exists():
            return None
        target_dir = self.root / "raw" / "rejected"
        target_dir.mkdir(exist_ok=True)
        n = 1
        while (target := target_dir / f"{name}.{n}.s2p").exists():
            n += 1
        shutil.move(str(path), target)
        entry = self._step(step_id)
        relative = str(path.relative_to(self.root))
        if relative in entry["files"]:
            entry["files"].remove(relative)
        entry.setdefault("rejected", []).append(str(target.relative_to(self.root)))
        self.save()
        return target

    def read_raw(self, relative: str) -> tuple[np.ndarray, np.ndarray]:
        """Frequencies (Hz) and S (nf, 2, 2) of a stored sweep (path relative to the run)."""
        from bench.touchstone import load_measurement

        path = self.root / relative
        if not path.is_file():
            raise InputError(
                "a raw sweep listed in the manifest is missing",
                path=str(path),
                hint="restore the file; zbench never deletes raw sweeps",
            )
        measurement = load_measurement(path)
        return np.asarray(measurement.f, dtype=float), np.asarray(measurement.s, dtype=complex)

    def point_latest(self, name: str = LAST_CALIBRATION) -> Path:
        """Point ``<runs folder>/<name>`` at this run (a relative symbolic link, replaced
        atomically), so a later procedure can reuse this run's calibration by that name."""
        link = self.root.parent / name
        tmp = self.root.parent / f".{name}.{self.run_id}.tmp"
        tmp.unlink(missing_ok=True)
        tmp.symlink_to(self.root.name, target_is_directory=True)
        tmp.replace(link)
        return link

    def log(self, message: str) -> None:
        """Append one line to the run's log (plain text, flushed at once)."""
        with open(self.root / "log", "a", encoding="utf-8") as handle:
            handle.write(f"{now_iso()} {message}\n")
            handle.flush()


def _json_default(value: Any) -> Any:
    if isinstance(value, (np.floating, np.integer)):
        return value.item()
    if isinstance(value, np.ndarray):
        return value.tolist()
    if isinstance(value, Path):
        return str(value)
    if isinstance(value, (set, tuple)):
        return list(value)
    return str(value)
