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


class UnmeasuredPoints(DriverError):  # noqa: N818 (named for what the analyser sent)
    """The analyser sent SCPI's not-a-number or infinity (9.91E37, ±9.9E37) for points of
    a sweep: it could not measure them (a receiver overload, say). No sweep with such
    points is taken as a measurement: a calibration or a correction would carry them
    into every frequency they touch."""

    def __init__(
        self,
        resource: str,
        trace: str,
        frequencies: tuple[float, ...],
        count: int,
        *,
        sweeps: int = 1,
    ):
        self.resource = resource
        self.trace = trace
        self.frequencies = frequencies
        self.count = count
        self.sweeps = sweeps
        listed = ", ".join(f"{f:g} Hz" for f in frequencies[:3])
        more = ", ..." if count > 3 else ""
        again = f" (each of {sweeps} sweeps in a row had such points)" if sweeps > 1 else ""
        super().__init__(
            f"{resource}: the analyser sent no number (SCPI's 9.91E37 or 9.9E37) for {count} "
            f"point{'' if count == 1 else 's'} of {trace} ({listed}{more}): it could not "
            f"measure them{again}\n  fix: an overloaded receiver is the usual cause: lower the "
            "source power, check the connections and the analyser's own messages, then "
            "resume the run to sweep again"
        )


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
