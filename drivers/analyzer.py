"""Generic SCPI network analyser driven by a command map.

:class:`NetworkAnalyzer` receives a transport and a :class:`~drivers.command_map.CommandMap`;
every command it sends comes from the map, so an analyser with another dialect is a new
YAML file, not new code. It knows sweeps and S-parameters, nothing of impedance or models.

Typical use::

    with VisaTransport.open(resource) as link:
        vna = NetworkAnalyzer(link, load_command_map("default"))
        vna.configure(SweepPlan(100.0, 100e6, 201, "log", 100.0, 0.0))
        data = vna.sweep(("S21",))
"""

from __future__ import annotations

import math
import time
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from drivers.command_map import CommandMap, load_command_map
from drivers.errors import (
    CommandMapError,
    DriverError,
    InstrumentError,
    InstrumentTimeout,
    PlanError,
    TransportError,
    UnmeasuredPoints,
)
from drivers.scpi import ScpiInstrument, scpi_non_numbers
from drivers.transport import Transport

S_PARAMETERS = ("S11", "S21", "S12", "S22")
_INDEX = {"S11": (0, 0), "S21": (1, 0), "S12": (0, 1), "S22": (1, 1)}


@dataclass(frozen=True)
class SweepPlan:
    """One frequency sweep.

    ``start_hz`` < ``stop_hz`` (Hz, > 0), ``points`` (>= 2), ``spacing`` ``"linear"`` or
    ``"log"``, ``ifbw_hz`` (IF bandwidth, Hz, > 0), ``power_dbm`` (source power, dBm).
    The analyser's own limits are checked by :meth:`NetworkAnalyzer.check_plan`.
    """

    start_hz: float
    stop_hz: float
    points: int
    spacing: str = "log"
    ifbw_hz: float = 100.0
    power_dbm: float = 0.0

    def __post_init__(self) -> None:
        problems = []
        for name in ("start_hz", "stop_hz", "ifbw_hz", "power_dbm"):
            value = getattr(self, name)
            if isinstance(value, bool) or not isinstance(value, int | float):
                problems.append(f"{name} must be a number, got {value!r}")
            elif not math.isfinite(value):
                problems.append(f"{name} must be finite, got {value!r}")
        if isinstance(self.points, bool) or not isinstance(self.points, int | np.integer):
            problems.append(f"points must be an integer, got {self.points!r}")
        elif self.points < 2:
            problems.append(f"points must be 2 or more, got {self.points}")
        if self.spacing not in ("linear", "log"):
            problems.append(f"spacing must be 'linear' or 'log', got {self.spacing!r}")
        if not problems:
            if not 0 < self.start_hz < self.stop_hz:
                problems.append(
                    f"need 0 < start_hz < stop_hz, got {self.start_hz!r} and {self.stop_hz!r}"
                )
            if not self.ifbw_hz > 0:
                problems.append(f"ifbw_hz must be > 0, got {self.ifbw_hz!r}")
        if problems:
            raise PlanError("sweep plan: " + "; ".join(problems))


@dataclass(frozen=True, eq=False)
class SweepData:
    """The traces of one sweep: ``f`` (Hz, shape (nf,)) and complex ``traces`` per
    S-parameter (shape (nf,)), as the analyser returned them (raw or corrected, as its
    correction state was). ``plan`` is the read-back sweep set-up.
    """

    f: np.ndarray
    traces: dict[str, np.ndarray]
    plan: SweepPlan | None = None
    parameters: tuple[str, ...] = field(init=False)

    def __post_init__(self) -> None:
        object.__setattr__(self, "parameters", tuple(self.traces))

    @property
    def s(self) -> np.ndarray:
        """S-parameters as a complex (nf, 2, 2) array (scikit-rf order); NaN where not read."""
        s = np.full((self.f.size, 2, 2), np.nan + 1j * np.nan, dtype=complex)
        for name, trace in self.traces.items():
            if name not in _INDEX:
                continue
            i, j = _INDEX[name]
            s[:, i, j] = trace
        return s

    def __getitem__(self, parameter: str) -> np.ndarray:
        return self.traces[parameter]


class NetworkAnalyzer(ScpiInstrument):
    """A network analyser speaking the dialect of ``command_map``."""

    #: the map kind this driver reads
    kind = "network"

    def __init__(self, transport: Transport, command_map: CommandMap | str | Path = "default"):
        if not isinstance(command_map, CommandMap):
            command_map = load_command_map(command_map)
        if command_map.kind != self.kind:
            raise CommandMapError(
                command_map.path,
                "kind",
                f"a map of kind {command_map.kind!r} cannot drive a {self.kind} analyser",
                hint="give the map written for this instrument",
            )
        self.map = command_map
        super().__init__(
            transport,
            error_query=command_map.error_query,
            no_error_code=command_map.no_error_code,
            max_errors_per_drain=command_map.max_errors_per_drain,
        )
        self._plan: SweepPlan | None = None

    # -- identity and state --------------------------------------------------------

    def identify(self) -> str:
        """The analyser's identity answer (``*IDN?`` in the default map)."""
        return self.transport.query(self.map.identity)

    def reset(self) -> None:
        """Reset to the power-on state and clear the status (``*RST``, ``*CLS``)."""
        for command in self.map.reset:
            self.transport.write(command)
        self.transport.query(self.map.operation_complete)
        self.check_errors(" ; ".join(self.map.reset))
        self._plan = None

    # -- sweep set-up --------------------------------------------------------------

    def check_plan(self, plan: SweepPlan) -> None:
        """Raise :class:`PlanError` listing every way ``plan`` exceeds the map's limits."""
        limits = self.map.limits
        problems = []
        for name, value, rng, unit in (
            ("start_hz", plan.start_hz, limits.frequency_hz, "Hz"),
            ("stop_hz", plan.stop_hz, limits.frequency_hz, "Hz"),
            ("points", plan.points, limits.points, ""),
            ("ifbw_hz", plan.ifbw_hz, limits.ifbw_hz, "Hz"),
            ("power_dbm", plan.power_dbm, limits.power_dbm, "dBm"),
        ):
            if value not in rng:
                problems.append(
                    f"{name} = {value:g} {unit} is outside {rng.min:g}…{rng.max:g} {unit}"
                )
        if problems:
            raise PlanError(
                f"sweep plan outside the limits of command map {self.map.name!r} "
                f"({self.map.path}, key 'limits'): "
                + "; ".join(problems)
                + ". Nothing was sent; change the sweep, or the limits if the instrument allows."
            )

    def configure(self, plan: SweepPlan) -> SweepPlan:
        """Set the sweep and the data format; return what the analyser really set.

        The plan is checked against the map's limits first, and nothing is sent if it
        is outside them. Each setting is followed by an error-queue drain. The analyser
        may round (points, IF bandwidth): the returned plan holds its read-back values.
        """
        self.check_plan(plan)
        settings = self.map.settings
        # Keep start < stop at every step, so the instrument never refuses an
        # intermediate state: move the stop first when the new start is above the old stop.
        present_stop = self.query_float(settings["stop_hz"].query)
        order = ["start_hz", "stop_hz"] if plan.start_hz < present_stop else ["stop_hz", "start_hz"]
        for name in [*order, "points", "spacing", "ifbw_hz", "power_dbm"]:
            self.write_checked(settings[name].command(getattr(plan, name)))
        for command in self.map.format_commands:
            self.write_checked(command)
        self._plan = self.read_settings()
        return self._plan

    def read_settings(self) -> SweepPlan:
        """The sweep set-up as the analyser reports it."""
        settings = self.map.settings
        spacing_answer = self.transport.query(settings["spacing"].query)
        spacing = settings["spacing"].parse_choice(spacing_answer)
        if spacing is None:
            raise DriverError(
                f"{self.resource_name}: answer {spacing_answer!r} to "
                f"{settings['spacing'].query!r} matches none of {settings['spacing'].choices}; "
                f"fix sweep.spacing.values in {self.map.path}"
            )
        return SweepPlan(
            start_hz=self.query_float(settings["start_hz"].query),
            stop_hz=self.query_float(settings["stop_hz"].query),
            points=round(self.query_float(settings["points"].query)),
            spacing=spacing,
            ifbw_hz=self.query_float(settings["ifbw_hz"].query),
            power_dbm=self.query_float(settings["power_dbm"].query),
        )

    def set_correction(self, on: bool) -> bool:
        """Switch the analyser's own correction on or off; returns the read-back state."""
        self.write_checked(self.map.correction.command("on" if on else "off"))
        return self.correction()

    def correction(self) -> bool:
        """Whether the analyser's own correction is on."""
        answer = self.transport.query(self.map.correction.query)
        state = self.map.correction.parse_choice(answer)
        if state is None:
            raise DriverError(
                f"{self.resource_name}: answer {answer!r} to {self.map.correction.query!r} "
                f"is neither on nor off; fix correction.values in {self.map.path}"
            )
        return state == "on"

    def sweep_time(self) -> float:
        """Expected duration of one sweep, s (``SWEep:TIME?``)."""
        return self.query_float(self.map.sweep_time_query)

    # -- measurement ---------------------------------------------------------------

    def sweep(self, parameters: tuple[str, ...] | list[str] | None = None) -> SweepData:
        """Run one sweep, wait for it, and read the frequencies and the asked traces.

        ``parameters`` is a subset of ``("S11", "S21", "S12", "S22")`` (all that the map
        offers by default). The end of the sweep is awaited as the map's ``trigger.sync``
        says: one blocking ``*OPC?``-like query, or polling a status register; either is
        bounded by the reported sweep time × ``timeout_factor`` + ``timeout_margin_s``.
        Without a stimulus query the frequencies are computed from the read-back set-up.
        """
        wanted = tuple(parameters) if parameters is not None else self.map.parameters
        unknown = [p for p in wanted if p not in self.map.parameters]
        if unknown or not wanted:
            raise PlanError(
                f"cannot read {unknown or 'no parameters'}: command map {self.map.name!r} "
                f"offers {list(self.map.parameters)} (key data.parameters)"
            )
        expected_s = self.sweep_time()
        wait_s = max(expected_s, 0.0) * self.map.timeout_factor + self.map.timeout_margin_s
        for command in self.map.sync.before:
            self.transport.write(command)
        self.transport.write(self.map.trigger)
        self.wait_for_sweep(wait_s)
        self.check_errors(self.map.trigger)

        f = self.frequencies()
        traces: dict[str, np.ndarray] = {}
        for position, name in enumerate(wanted):
            setup, command = self.map.trace_commands(name, position)
            for line in setup:
                self.write_checked(line)
            values = self._read_values(command)
            if values.size != 2 * f.size:
                raise TransportError(
                    self.resource_name,
                    f"query {command!r}",
                    f"expected {2 * f.size} values (re, im for {f.size} frequencies), "
                    f"found {values.size}",
                    hint="the block was cut or corrupted, or the data format of the map is "
                    "not the instrument's (data.format, data.byte_order): repeat the sweep, "
                    "then check the map with zbench probe",
                )
            trace = values[0::2] + 1j * values[1::2]
            unmeasured = ~np.isfinite(trace)
            if np.any(unmeasured):
                raise UnmeasuredPoints(
                    self.resource_name,
                    name,
                    tuple(float(x) for x in f[unmeasured][:3]),
                    int(np.count_nonzero(unmeasured)),
                )
            traces[name] = trace
        return SweepData(f=f, traces=traces, plan=self._plan)

    def wait_for_sweep(self, wait_s: float) -> None:
        """Wait for the end of the sweep as ``trigger.sync`` says, for at most ``wait_s``."""
        sync = self.map.sync
        if sync.method == "opc":
            with self.transport.timeout(wait_s):
                done = self.transport.query(sync.query)
            if done.strip() not in ("1", "+1"):
                raise DriverError(
                    f"{self.resource_name}: expected '1' from {sync.query!r} after "
                    f"{self.map.trigger!r}, found {done!r}"
                )
            return
        deadline = time.monotonic() + wait_s
        while True:
            answer = self.transport.query(sync.query)
            try:
                register = int(float(answer))
            except ValueError:
                raise DriverError(
                    f"{self.resource_name}: expected an integer register from {sync.query!r}, "
                    f"found {answer[:80]!r}; fix trigger.sync.query in {self.map.path}"
                ) from None
            if register & sync.mask:
                return
            if time.monotonic() >= deadline:
                raise InstrumentTimeout(
                    self.resource_name,
                    f"poll {sync.query!r} for mask {sync.mask}",
                    f"the sweep did not end within {wait_s:.3g} s (last register {register})",
                )
            self._sleep(sync.interval_s)

    def _sleep(self, seconds: float) -> None:
        time.sleep(seconds)

    def frequencies(self) -> np.ndarray:
        """The stimulus list: queried when the map has a query, else computed from the
        read-back start, stop, points and spacing (log: geometric, linear: even steps)."""
        if self.map.frequency_query is not None:
            f = self._read_values(self.map.frequency_query)
            if f.size < 1:
                raise TransportError(
                    self.resource_name, f"query {self.map.frequency_query!r}", "no frequencies"
                )
            return f
        plan = self._plan if self._plan is not None else self.read_settings()
        if plan.spacing == "log":
            return np.geomspace(plan.start_hz, plan.stop_hz, plan.points)
        return np.linspace(plan.start_hz, plan.stop_hz, plan.points)

    def check_errors(self, command: str) -> None:
        """As :meth:`ScpiInstrument.check_errors`, with the map's words for known codes."""
        try:
            super().check_errors(command)
        except InstrumentError as exc:
            words = self.map.explain_error(exc.code)
            if not words:
                raise
            raise InstrumentError(
                exc.code,
                exc.text,
                exc.command,
                resource=exc.resource,
                others=exc.others,
                fix=f"{words} (command map {self.map.name!r})",
            ) from None

    def snapshot(self) -> dict[str, Any]:
        """Identity and present settings, for a run's provenance (JSON-ready)."""
        plan = self.read_settings()
        return {
            "identity": self.identify(),
            "resource": self.resource_name,
            "command_map": self.map.name,
            "start_hz": plan.start_hz,
            "stop_hz": plan.stop_hz,
            "points": plan.points,
            "spacing": plan.spacing,
            "ifbw_hz": plan.ifbw_hz,
            "power_dbm": plan.power_dbm,
            "correction": self.correction(),
            "sweep_time_s": self.sweep_time(),
        }

    def _read_values(self, command: str) -> np.ndarray:
        """The numbers a query answers, SCPI's codes for no number as NaN and ±inf
        (:func:`~drivers.scpi.scpi_non_numbers`)."""
        if self.map.encoding == "binary":
            values = self.transport.query_binary(
                command,
                datatype=self.map.datatype,
                big_endian=self.map.big_endian,
                terminated=self.map.block_terminated,
            )
        else:
            values = self.transport.query_ascii_values(command)
        return scpi_non_numbers(values)
