"""Exceptions of the tool layer.

Every error a user can cause is a :class:`ZbenchError` whose message says what was
expected, what was found and what to do. The command line turns them into a message
on stderr and exit code 2 (bad input) or 3 (fit quality), never a traceback.
Instrument I/O has its own family in :mod:`drivers.errors`.
"""

from __future__ import annotations


class ZbenchError(Exception):
    """Base of every error zbench raises on purpose."""

    exit_code = 1


class InputError(ZbenchError):
    """Bad input from the user: a file, an option, a value out of range (exit 2)."""

    exit_code = 2

    def __init__(self, message: str, *, path: str | None = None, hint: str | None = None):
        self.path = path
        self.hint = hint
        text = f"{path}: {message}" if path else message
        if hint:
            text = f"{text}\n  fix: {hint}"
        super().__init__(text)


class ProcedureError(InputError):
    """A procedure file that does not validate; carries file, line and key."""

    def __init__(
        self,
        message: str,
        *,
        path: str | None = None,
        line: int | None = None,
        key: str | None = None,
        hint: str | None = None,
    ):
        self.line = line
        self.key = key
        where = path or "<procedure>"
        if line is not None:
            where = f"{where}:{line}"
        if key:
            message = f"{key}: {message}"
        super().__init__(message, path=where, hint=hint)


class FitError(ZbenchError):
    """A fit that could not be made, or that does not meet its quality bound (exit 3)."""

    exit_code = 3


class RunError(ZbenchError):
    """A run that stopped; the run folder stays resumable."""

    exit_code = 1


class RunFolderError(RunError):
    """A run that stopped because its folder could not be written: a full disk, a
    read-only or not writable folder (exit 2: the fix is the user's, then resume)."""

    exit_code = 2


class BiasNotConfirmedOffError(RunError):
    """The DC source's output could not be confirmed off after a biased run (exit 4).

    A status of its own, so that a script driving zbench can tell "the part may still be
    charged" from any other stop.
    """

    exit_code = 4


class SafetyError(ZbenchError):
    """A requested action would exceed a safety limit; nothing was applied."""

    exit_code = 2
