"""DC bias source with hard limits that no request can pass.

The caller gives the limits: the lowest of the part's rated voltage and the bias tee's
and DC blocks' ratings, and a current limit (docs/design.md §7). A request beyond them
raises :class:`~drivers.errors.SafetyLimitError` before anything is sent. Voltage is
changed in ramps; :meth:`DcSource.biased` ramps up, yields, and on any exit (normal or
an exception) ramps down and switches the output off, then waits for the part to
discharge.

Commands (docs/design.md §8): ``SOURce:VOLTage[:LEVel][:IMMediate][:AMPLitude] <V>``,
``SOURce:CURRent[:LEVel] <A>``, ``OUTPut[:STATe] ON|OFF``, ``MEASure:VOLTage?``,
``MEASure:CURRent?``.
"""

from __future__ import annotations

import contextlib
import math
import time
from collections.abc import Callable, Iterator
from dataclasses import dataclass

from drivers.command_map import format_number
from drivers.errors import DriverError, SafetyLimitError
from drivers.scpi import ScpiInstrument
from drivers.transport import Transport


@dataclass(frozen=True)
class DcSourceCommands:
    """Command forms of a DC source; the defaults are the SCPI-99 long forms."""

    voltage: str = "SOURce:VOLTage:LEVel:IMMediate:AMPLitude {value}"
    voltage_query: str = "SOURce:VOLTage:LEVel:IMMediate:AMPLitude?"
    current_limit: str = "SOURce:CURRent:LEVel {value}"
    current_limit_query: str = "SOURce:CURRent:LEVel?"
    output: str = "OUTPut:STATe {value}"
    output_query: str = "OUTPut:STATe?"
    measure_voltage: str = "MEASure:VOLTage?"
    measure_current: str = "MEASure:CURRent?"
    error_query: str = "SYSTem:ERRor:NEXT?"
    #: Optional (None: the instrument has no such command, or the map leaves it out).
    voltage_max_query: str | None = None
    over_voltage: str | None = None
    over_voltage_query: str | None = None
    over_current: str | None = None


MAX_RAMP_STEPS = 10_000  # a ramp longer than this is a mistake in the step, not a plan


class DcSource(ScpiInstrument):
    """A DC voltage source limited to ``0 … max_voltage`` (V) and ``max_current`` (A).

    ``max_voltage`` and ``max_current`` must be finite and > 0. ``sleep`` is the wait
    used between ramp steps and for the discharge (``time.sleep`` by default).
    """

    def __init__(
        self,
        transport: Transport,
        *,
        max_voltage: float,
        max_current: float,
        commands: DcSourceCommands | None = None,
        sleep: Callable[[float], None] = time.sleep,
    ):
        for name, value in (("max_voltage", max_voltage), ("max_current", max_current)):
            if not (_is_number(value) and value > 0):
                raise SafetyLimitError(f"{name} must be a finite number > 0, got {value!r}")
        self.commands = commands or DcSourceCommands()
        super().__init__(transport, error_query=self.commands.error_query)
        self.max_voltage = float(max_voltage)
        self.max_current = float(max_current)
        self._sleep = sleep
        self._setpoint: float | None = None
        self._current_limit: float | None = None

    # -- limits --------------------------------------------------------------------

    def check_voltage(self, volts: float) -> float:
        """Return ``volts`` as a float if 0 ≤ volts ≤ max_voltage, else raise."""
        if not _is_number(volts):
            raise SafetyLimitError(
                f"{self.resource_name}: bias voltage must be a finite number, got {volts!r}; "
                "nothing was sent"
            )
        if not 0.0 <= volts <= self.max_voltage:
            raise SafetyLimitError(
                f"{self.resource_name}: bias {volts:g} V is outside 0…{self.max_voltage:g} V "
                "(the lowest of the part, bias-tee and DC-block ratings); nothing was sent"
            )
        return float(volts)

    def check_current(self, amps: float) -> float:
        """Return ``amps`` as a float if 0 < amps ≤ max_current, else raise."""
        if not _is_number(amps):
            raise SafetyLimitError(
                f"{self.resource_name}: current limit must be a finite number, got {amps!r}; "
                "nothing was sent"
            )
        if not 0.0 < amps <= self.max_current:
            raise SafetyLimitError(
                f"{self.resource_name}: current limit {amps:g} A is outside "
                f"(0, {self.max_current:g}] A; nothing was sent"
            )
        return float(amps)

    def check_ramp(self, step_v: float, dwell_s: float) -> None:
        """Raise unless 0 < step_v (V) with at most MAX_RAMP_STEPS steps over the whole
        range, and 0 ≤ dwell_s (s) finite."""
        if not (_is_number(step_v) and step_v > 0):
            raise SafetyLimitError(f"ramp step must be > 0 V, got {step_v!r}; nothing was sent")
        if self.max_voltage / step_v > MAX_RAMP_STEPS:
            raise SafetyLimitError(
                f"{self.resource_name}: ramp steps of {step_v:g} V would need up to "
                f"{self.max_voltage / step_v:.3g} steps (at most {MAX_RAMP_STEPS}); "
                "use a larger step. Nothing was sent"
            )
        if not (_is_number(dwell_s) and dwell_s >= 0):
            raise SafetyLimitError(f"ramp dwell must be ≥ 0 s, got {dwell_s!r}; nothing was sent")

    # -- settings ------------------------------------------------------------------

    def set_current_limit(self, amps: float) -> None:
        """Set the current limit (compliance), A, 0 < amps ≤ max_current."""
        amps = self.check_current(amps)
        self.write_checked(self.commands.current_limit.format(value=format_number(amps)))
        self._current_limit = amps

    def set_voltage(self, volts: float) -> None:
        """Set the voltage at once, V, 0 ≤ volts ≤ max_voltage (prefer :meth:`ramp_to`)."""
        volts = self.check_voltage(volts)
        self._setpoint = None  # unknown until the instrument accepts it
        self.write_checked(self.commands.voltage.format(value=format_number(volts)))
        self._setpoint = volts

    def setpoint(self) -> float:
        """The programmed voltage, V (read from the instrument the first time)."""
        if self._setpoint is None:
            self._setpoint = self.query_float(self.commands.voltage_query)
        return self._setpoint

    def ramp_to(self, volts: float, step_v: float = 0.5, dwell_s: float = 0.05) -> None:
        """Move the voltage to ``volts`` in steps of at most ``step_v`` (V, > 0), waiting
        ``dwell_s`` (s, ≥ 0) after each; the target is checked before anything is sent."""
        volts = self.check_voltage(volts)
        self.check_ramp(step_v, dwell_s)
        # A setpoint left above the limit by someone else: plan the ramp from the limit,
        # so every level sent is at or below it (the first step is a descent anyway).
        start = min(self.setpoint(), self.max_voltage)
        low, high = min(start, volts), max(start, volts)
        steps = max(1, math.ceil(abs(volts - start) / step_v - 1e-9))
        for k in range(1, steps + 1):
            level = volts if k == steps else start + (volts - start) * k / steps
            self.set_voltage(min(max(level, low), high))
            if dwell_s:
                self._sleep(dwell_s)

    def output_on(self) -> None:
        """Switch the output on (sets the current limit to max_current if none was set)."""
        if self._current_limit is None:
            self.set_current_limit(self.max_current)
        if self.setpoint() > self.max_voltage:
            self.set_voltage(0.0)
        self.write_checked(self.commands.output.format(value="ON"))

    def output_off(self) -> None:
        """Switch the output off."""
        self.write_checked(self.commands.output.format(value="OFF"))

    def output_is_on(self) -> bool:
        """Whether the output is on."""
        answer = self.transport.query(self.commands.output_query).strip().upper()
        if answer in ("1", "+1", "ON"):
            return True
        if answer in ("0", "+0", "OFF"):
            return False
        raise DriverError(
            f"{self.resource_name}: expected 0/1 in answer to {self.commands.output_query!r}, "
            f"found {answer!r}"
        )

    def reported_max_voltage(self) -> float | None:
        """The highest voltage the instrument says it can set, V (None: the map cannot ask)."""
        if self.commands.voltage_max_query is None:
            return None
        return self.query_float(self.commands.voltage_max_query)

    def set_protection(self, volts: float, amps: float) -> list[str]:
        """Set the instrument's own over-voltage (and over-current) protection at ``volts``
        (V) and ``amps`` (A), where the map has the commands; returns what was set."""
        done = []
        if self.commands.over_voltage is not None:
            volts = self.check_voltage(volts)
            self.write_checked(self.commands.over_voltage.format(value=format_number(volts)))
            done.append(f"over-voltage protection {volts:g} V")
        if self.commands.over_current is not None:
            amps = self.check_current(amps)
            self.write_checked(self.commands.over_current.format(value=format_number(amps)))
            done.append(f"over-current protection {amps:g} A")
        return done

    def zero_and_off(self) -> None:
        """Output off and the set-point to 0 V, both attempted; the first failure is raised.

        For a link that may have been cut while biased: the output goes off first, and a
        set-point left at the bias voltage would come back the moment someone switches
        the output on again, so it is set to 0 too.
        """
        try:
            self.output_off()
        finally:
            self._setpoint = None
            self.write_checked(self.commands.voltage.format(value=format_number(0.0)))
            self._setpoint = 0.0

    def measure_voltage(self) -> float:
        """Measured output voltage, V."""
        return self.query_float(self.commands.measure_voltage)

    def measure_current(self) -> float:
        """Measured output current, A."""
        return self.query_float(self.commands.measure_current)

    # -- the safe way to bias a part -------------------------------------------------

    def shut_down(
        self, step_v: float = 0.5, dwell_s: float = 0.05, discharge_s: float = 0.0
    ) -> None:
        """Ramp to 0 V, switch the output off and wait ``discharge_s`` (s).

        The output is switched off even if the ramp fails (e.g. an instrument error);
        the first failure is raised after that.
        """
        try:
            self.ramp_to(0.0, step_v, dwell_s)
        finally:
            try:
                self.output_off()
            finally:
                if discharge_s > 0:
                    self._sleep(discharge_s)

    @contextlib.contextmanager
    def biased(
        self,
        volts: float,
        *,
        current_limit: float | None = None,
        step_v: float = 0.5,
        dwell_s: float = 0.05,
        discharge_s: float = 0.5,
    ) -> Iterator[DcSource]:
        """Hold ``volts`` on the part inside the block; ramp down and switch off on exit.

        Checks ``volts`` and ``current_limit`` (default max_current) before anything is
        sent. On leaving the block — normally or by an exception — the voltage is ramped
        to 0, the output switched off, and ``discharge_s`` waited.
        """
        volts = self.check_voltage(volts)
        self.check_ramp(step_v, dwell_s)
        amps = self.check_current(self.max_current if current_limit is None else current_limit)
        self.set_current_limit(amps)
        try:
            if self.setpoint() != 0.0:
                self.ramp_to(0.0, step_v, dwell_s)
            self.output_on()
            self.ramp_to(volts, step_v, dwell_s)
            yield self
        except BaseException:
            # Leave the part safe, but report the original failure, not a cleanup one.
            with contextlib.suppress(DriverError):
                self.shut_down(step_v, dwell_s, discharge_s)
            raise
        else:
            self.shut_down(step_v, dwell_s, discharge_s)


def _is_number(value: object) -> bool:
    """A finite real number (booleans excluded)."""
    return not isinstance(value, bool) and isinstance(value, int | float) and math.isfinite(value)
