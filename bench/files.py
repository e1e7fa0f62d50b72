"""Atomic file writes: a reader never sees half a file, a crash never loses the old one."""

from __future__ import annotations

import contextlib
import os
import tempfile
from pathlib import Path


def _default_mode() -> int:
    """Permissions an ordinary ``open()`` would give a new file under the current umask."""
    umask = os.umask(0)
    os.umask(umask)
    read_write_all = 0o666  # rw for owner, group and others, before the umask
    return read_write_all & ~umask


def atomic_write_bytes(path: str | os.PathLike[str], data: bytes) -> Path:
    """Write ``data`` to ``path`` through a temporary file in the same folder and a rename."""
    target = Path(path)
    try:
        target.parent.mkdir(parents=True, exist_ok=True)
        fd, tmp = tempfile.mkstemp(prefix=f".{target.name}.", suffix=".tmp", dir=target.parent)
    except OSError as exc:
        _name_target(exc, target)
        raise
    try:
        # mkstemp makes the file owner-only; run files are meant to be shared like any other.
        os.fchmod(fd, _default_mode())
        with os.fdopen(fd, "wb") as handle:
            handle.write(data)
            handle.flush()
            os.fsync(handle.fileno())
        os.replace(tmp, target)
    except BaseException as exc:
        with contextlib.suppress(OSError):  # keep the first error, not the clean-up's
            Path(tmp).unlink(missing_ok=True)
        if isinstance(exc, OSError):
            _name_target(exc, target)
        raise
    return target


def _name_target(exc: OSError, target: Path) -> None:
    """Name the file being written in ``exc`` (a failed write names none, a failed
    temporary file names itself): the message then says which file could not be saved."""
    if exc.filename is None or Path(str(exc.filename)).name.startswith(f".{target.name}."):
        exc.filename = str(target)


def atomic_write_text(path: str | os.PathLike[str], text: str, encoding: str = "utf-8") -> Path:
    """Text counterpart of :func:`atomic_write_bytes`."""
    return atomic_write_bytes(path, text.encode(encoding))
