"""What every SCPI instrument driver shares: checked writes and the error queue.

After every configuring write the instrument's error queue (``SYSTem:ERRor[:NEXT]?``,
mandatory in SCPI-99) is drained; the first entry becomes an
:class:`~drivers.errors.InstrumentError` carrying the code, the text and the command.
"""

from __future__ import annotations

import re

import numpy as np

from drivers.errors import DriverError, InstrumentError
from drivers.transport import Transport

# SCPI-99 error/event queue entry: <code>,"<text>[;<device-dependent info>]"
_ERROR_RE = re.compile(r'^\s*([+-]?\d+)\s*,\s*"?(.*?)"?\s*$', re.DOTALL)

DEFAULT_ERROR_QUERY = "SYSTem:ERRor:NEXT?"

# SCPI's numbers that stand for no number: 9.91E37 for not-a-number and ±9.9E37 for
# ±infinity (SCPI-99 vol. 1, the NaN and INFinity values; from memory). An analyser
# sends them for points it could not measure (an overload, say).
SCPI_NAN = 9.91e37
SCPI_INFINITY = 9.9e37


def scpi_non_numbers(values: np.ndarray) -> np.ndarray:
    """``values`` with SCPI's not-a-number and infinity codes as NaN and ±inf: read as
    numbers, they are 10³⁷ and would pass for a measurement."""
    values = np.asarray(values, dtype=float)
    size = np.abs(values)
    if not np.any(size >= 0.999 * SCPI_INFINITY):
        return values
    # Within 1e-4 of the code: a binary block's 32-bit floats carry it to 1e-7.
    infinite = np.isclose(size, SCPI_INFINITY, rtol=1e-4)
    out = np.where(infinite, np.copysign(np.inf, values), values)
    out[np.isclose(size, SCPI_NAN, rtol=1e-4)] = np.nan
    return out


def parse_error_entry(answer: str) -> tuple[int, str]:
    """Split one error-queue answer, e.g. ``-222,"Data out of range"`` -> (-222, text)."""
    match = _ERROR_RE.match(answer)
    if match is None:
        raise DriverError(
            f"expected an error-queue entry '<code>,\"<text>\"', found {answer[:80]!r}; "
            "check the command map's error_query"
        )
    return int(match.group(1)), match.group(2)


class ScpiInstrument:
    """Base of the instrument drivers: holds the transport, drains the error queue."""

    def __init__(
        self,
        transport: Transport,
        *,
        error_query: str = DEFAULT_ERROR_QUERY,
        no_error_code: int = 0,
        max_errors_per_drain: int = 32,
    ):
        self.transport = transport
        self._error_query = error_query
        self._no_error_code = no_error_code
        self._max_errors = max_errors_per_drain

    @property
    def resource_name(self) -> str:
        return getattr(self.transport, "resource_name", "<transport>")

    def identify(self) -> str:
        """The instrument's ``*IDN?`` answer (maker, model, serial, firmware)."""
        return self.transport.query("*IDN?")

    def drain_errors(self) -> list[tuple[int, str]]:
        """Read the error queue until it reports no error; returns the entries read."""
        entries: list[tuple[int, str]] = []
        for _ in range(self._max_errors):
            code, text = parse_error_entry(self.transport.query(self._error_query))
            if code == self._no_error_code:
                return entries
            entries.append((code, text))
        raise DriverError(
            f"{self.resource_name}: the error queue did not empty after "
            f"{self._max_errors} reads (last: {entries[-1]}); clear the instrument (*CLS)"
        )

    def check_errors(self, command: str) -> None:
        """Raise :class:`InstrumentError` if the queue holds anything after ``command``."""
        entries = self.drain_errors()
        if entries:
            (code, text), *others = entries
            raise InstrumentError(
                code, text, command, resource=self.resource_name, others=tuple(others)
            )

    def write_checked(self, command: str) -> None:
        """Send a configuring command and raise if the instrument queued an error."""
        self.transport.write(command)
        self.check_errors(command)

    def query_float(self, command: str) -> float:
        """Query a number; a non-numeric answer is a clear :class:`DriverError`."""
        answer = self.transport.query(command)
        try:
            return float(answer)
        except ValueError:
            raise DriverError(
                f"{self.resource_name}: expected a number in answer to {command!r}, "
                f"found {answer[:80]!r}"
            ) from None
