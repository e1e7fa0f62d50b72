"""The simulated DC bias source: voltage, current limit, output, measurements.

``SOURce:VOLTage`` above the source's hard maximum is refused with ``-222`` (nothing
changes); so is a current limit above its maximum. ``MEASure:VOLTage?`` reads the output
terminal voltage and ``MEASure:CURRent?`` the output current, including the charging
current of a capacitor at the selected fixture position when the voltage steps (see
:mod:`simulated_instruments.dc_bias`). Readings carry a little seeded noise
(0.1 mV, 0.5 µA RMS), as a real meter's last digits do.
"""

from __future__ import annotations

import numpy as np

from simulated_instruments.instruments.nodes import none, one
from simulated_instruments.scpi import (
    CommandTree,
    Instrument,
    ScpiError,
    Session,
    format_number,
    parse_boolean,
    parse_numeric,
)
from simulated_instruments.state import BenchState

VOLTAGE_NOISE = 1e-4
CURRENT_NOISE = 0.5e-6


class DcSource(Instrument):
    name = "dc_source"

    def __init__(self, state: BenchState):
        self.state = state
        self.rng = np.random.default_rng([state.scenario.seed, 3])
        #: Over-voltage protection level, V (None: the source's own, 10 % above its maximum).
        self.protection: float | None = None
        self.tripped = False
        super().__init__()

    def protection_level(self) -> float:
        """The over-voltage protection level, V."""
        return self.state.bias.max_voltage * 1.1 if self.protection is None else self.protection

    def identity(self) -> str:
        return self.state.scenario.dc_identity

    def reset(self) -> None:
        self.protection = None
        self.tripped = False
        st = self.state
        with st.lock:
            st.bias.change(st.now(), setpoint=0.0, output=False, current_limit=st.bias.max_current)

    def _change(self, **settings: object) -> None:
        st = self.state
        with st.lock:
            st.bias.change(st.now(), **settings)

    def build(self, tree: CommandTree) -> None:
        bias = self.state.bias

        def set_voltage(s: Session, p: list[str]) -> None:
            value = parse_numeric(
                one(p, "voltage"),
                "V",
                minimum=0.0,
                maximum=bias.max_voltage,
                default=0.0,
                name="voltage",
            )
            self._change(setpoint=value)

        def set_current(s: Session, p: list[str]) -> None:
            value = parse_numeric(
                one(p, "current limit"),
                "A",
                minimum=0.0,
                maximum=bias.max_current,
                default=bias.max_current,
                name="current limit",
            )
            self._change(current_limit=value)

        def set_output(s: Session, p: list[str]) -> None:
            on = parse_boolean(one(p, "output state"), name="output")
            if on and self.tripped:
                raise ScpiError(-221, "over-voltage protection tripped; set a lower voltage")
            self._change(output=on)

        def measure(which: int):
            def query(s: Session, p: list[str]) -> str:
                none(p)
                st = self.state
                with st.lock:
                    reading = st.bias.measure(st.now())[which]
                    noise = VOLTAGE_NOISE if which == 0 else CURRENT_NOISE
                    return format_number(reading + self.rng.normal(0.0, noise))

            return query

        def level_query(read, maximum: float):
            # `?` reads the setting; `? MAXimum` / `? MINimum` the source's range (SCPI-99
            # numeric-value queries, from memory).
            def query(s: Session, p: list[str]) -> str:
                if not p:
                    return format_number(read())
                word = one(p, "MINimum or MAXimum").strip().upper()
                if word in ("MAX", "MAXIMUM"):
                    return format_number(maximum)
                if word in ("MIN", "MINIMUM"):
                    return format_number(0.0)
                raise ScpiError(-224, f"{word[:20]}: MINimum or MAXimum")

            return query

        def set_protection(s: Session, p: list[str]) -> None:
            value = parse_numeric(
                one(p, "protection level"),
                "V",
                minimum=0.0,
                maximum=bias.max_voltage * 1.1,
                default=bias.max_voltage * 1.1,
                name="protection level",
            )
            self.protection = value
            if bias.setpoint > value:
                self.tripped = True
                self._change(output=False)

        def set_voltage_protected(s: Session, p: list[str]) -> None:
            set_voltage(s, p)
            if self.protection is not None and bias.setpoint > self.protection:
                # Over-voltage protection trips: the output goes off until cleared.
                self.tripped = True
                self._change(output=False)

        tree.add(
            "SOURce:VOLTage[:LEVel][:IMMediate][:AMPLitude]",
            set=set_voltage_protected,
            query=level_query(lambda: bias.setpoint, bias.max_voltage),
        )
        tree.add(
            "SOURce:VOLTage:PROTection[:LEVel]",
            set=set_protection,
            query=lambda s, p: (none(p), format_number(self.protection_level()))[1],
        )
        tree.add(
            "SOURce:VOLTage:PROTection:TRIPped",
            query=lambda s, p: (none(p), "1" if self.tripped else "0")[1],
        )
        tree.add(
            "SOURce:CURRent[:LEVel][:IMMediate][:AMPLitude]",
            set=set_current,
            query=level_query(lambda: bias.current_limit, bias.max_current),
        )
        tree.add(
            "OUTPut[:STATe]",
            set=set_output,
            query=lambda s, p: (none(p), "1" if bias.output else "0")[1],
        )
        tree.add("MEASure[:SCALar]:VOLTage[:DC]", query=measure(0))
        tree.add("MEASure[:SCALar]:CURRent[:DC]", query=measure(1))
