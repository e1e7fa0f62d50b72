"""Fixture switch: one of N fixture positions onto the analyser's ports.

Commands (SCPI-99 ROUTe subsystem, the forms of docs/design.md §8):
``ROUTe:OPEN:ALL``, ``ROUTe:CLOSe (@<n>)``, ``ROUTe:CLOSe? (@<n>)`` (answers 1 or 0).
Selection is break-before-make: every path is opened before the new one is closed, so
two parts are never on the line together; ``*OPC?`` then waits for the relay to settle.
"""

from __future__ import annotations

from collections.abc import Iterable
from dataclasses import dataclass

from drivers.errors import DriverError, PlanError
from drivers.scpi import ScpiInstrument
from drivers.transport import Transport


@dataclass(frozen=True)
class SwitchCommands:
    """Command forms of a switch; the defaults are SCPI-99's."""

    open_all: str = "ROUTe:OPEN:ALL"
    close: str = "ROUTe:CLOSe (@{position})"
    close_query: str = "ROUTe:CLOSe? (@{position})"
    settled: str = "*OPC?"
    error_query: str = "SYSTem:ERRor:NEXT?"


class FixtureSwitch(ScpiInstrument):
    """A switch with numbered positions (``positions``: a count N for 1…N, or the numbers)."""

    def __init__(
        self,
        transport: Transport,
        positions: int | Iterable[int],
        *,
        commands: SwitchCommands | None = None,
        settle_timeout_s: float = 10.0,
    ):
        self.commands = commands or SwitchCommands()
        super().__init__(transport, error_query=self.commands.error_query)
        self.settle_timeout_s = settle_timeout_s
        if isinstance(positions, int):
            if positions < 1:
                raise ValueError(f"a switch needs at least one position, got {positions}")
            self.positions: tuple[int, ...] = tuple(range(1, positions + 1))
        else:
            self.positions = tuple(int(p) for p in positions)
            if not self.positions:
                raise ValueError("a switch needs at least one position, got none")

    def open_all(self) -> None:
        """Open every path (no position on the line)."""
        self.write_checked(self.commands.open_all)

    def select(self, position: int) -> int:
        """Put ``position`` on the line, break-before-make, and check it closed."""
        if position not in self.positions:
            raise PlanError(
                f"{self.resource_name}: fixture position {position!r} does not exist; "
                f"this switch has positions {list(self.positions)}. Nothing was sent."
            )
        self.open_all()
        command = self.commands.close.format(position=position)
        self.transport.write(command)
        # *OPC? answers once the relay has settled (IEEE 488.2 *OPC?), so the sweep
        # that follows never sees contact bounce.
        with self.transport.timeout(max(self.settle_timeout_s, 0.1)):
            self.transport.query(self.commands.settled)
        self.check_errors(command)
        if not self.is_closed(position):
            raise DriverError(
                f"{self.resource_name}: position {position} did not close "
                f"({self.commands.close_query.format(position=position)!r} answered 0); "
                "check the switch and its wiring"
            )
        return position

    def is_closed(self, position: int) -> bool:
        """Whether the path of ``position`` is closed."""
        answer = self.transport.query(self.commands.close_query.format(position=position))
        text = answer.strip()
        if text not in ("0", "1", "+0", "+1"):
            raise DriverError(
                f"{self.resource_name}: expected 0 or 1 in answer to "
                f"{self.commands.close_query.format(position=position)!r}, found {answer!r}"
            )
        return text.endswith("1")

    def selected(self) -> int | None:
        """The closed position, or None when all are open."""
        closed = [p for p in self.positions if self.is_closed(p)]
        if len(closed) > 1:
            raise DriverError(
                f"{self.resource_name}: positions {closed} are closed together; "
                "open all (ROUTe:OPEN:ALL) and select one"
            )
        return closed[0] if closed else None
