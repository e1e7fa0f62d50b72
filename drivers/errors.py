"""Exceptions of the instrument layer.

One base, :class:`DriverError`, with a subclass per failure a caller may want to treat
differently: the transport (timeouts, refused or dropped connections), the instrument's
own error queue, a plan outside an analyser's limits, a safety limit, and a bad command
map. Every message says what was expected, what was found and what to do.

The dependence runs ``bench -> drivers`` only, so nothing here imports ``bench``; the
tool layer wraps these errors in its own where it needs an exit code.
"""

from __future__ import annotations


class DriverError(Exception):
    """Base of every error the drivers raise on purpose."""


class TransportError(DriverError):
    """A VISA operation failed; names the resource and the operation.

    Attributes: ``resource`` (VISA resource string), ``operation`` (what was being
    done, e.g. ``query 'SENS:FREQ:STAR?'``), ``detail`` (what went wrong).
    """

    hint = "check the instrument is on, the resource string is right and the cable is in"

    def __init__(self, resource: str, operation: str, detail: str, *, hint: str | None = None):
        self.resource = resource
        self.operation = operation
        self.detail = detail
        if hint is not None:
            self.hint = hint
        super().__init__(f"{resource}: {operation}: {detail}\n  fix: {self.hint}")


class InstrumentTimeout(TransportError):  # noqa: N818 (name fixed by the driver contract)
    """The instrument did not answer within the timeout of the operation."""

    hint = (
        "the instrument may be busy or hung: raise the timeout for slow operations; "
        "before retrying, reopen the transport (a late answer would be read as the next one)"
    )


class ConnectionLost(TransportError):  # noqa: N818 (name fixed by the driver contract)
    """The connection to the instrument was closed or reset while in use."""

    hint = "the connection dropped: reopen the transport and resume the run"


class ConnectionFailed(TransportError):  # noqa: N818 (named like its siblings)
    """The connection could not be opened (refused, unreachable, unknown resource)."""

    hint = "check the instrument is on and listening at that address and port"


class InstrumentError(DriverError):
    """An entry of the instrument's error queue (``SYSTem:ERRor?``).

    Attributes: ``code`` (SCPI error number, negative for standard errors), ``text``
    (the instrument's message), ``command`` (the command after which it appeared),
    ``resource`` and ``others`` (further queue entries read in the same drain, as
    ``(code, text)`` pairs).
    """

    def __init__(
        self,
        code: int,
        text: str,
        command: str,
        *,
        resource: str = "",
        others: tuple[tuple[int, str], ...] = (),
        fix: str | None = None,
    ):
        self.code = code
        self.text = text
        self.command = command
        self.resource = resource
        self.others = others
        where = f"{resource}: " if resource else ""
        message = f'{where}instrument reported {code},"{text}" after {command!r}'
        if others:
            more = "; ".join(f'{c},"{t}"' for c, t in others)
            message += f" (and then: {more})"
        fix = fix or "check the value and form of that command against the command map"
        message += f"\n  fix: {fix}"
        super().__init__(message)


class PlanError(DriverError):
    """A request outside the instrument's limits; nothing was sent."""


class SafetyLimitError(DriverError):
    """A request beyond a hard safety limit (e.g. DC bias voltage); nothing was sent."""


class CommandMapError(DriverError):
    """A command map that does not load or validate; names the file, the key and a fix."""

    def __init__(self, path: str, key: str, message: str, *, hint: str | None = None):
        self.path = path
        self.key = key
        self.hint = hint
        text = f"{path}: {key}: {message}" if key else f"{path}: {message}"
        if hint:
            text += f"\n  fix: {hint}"
        super().__init__(text)
