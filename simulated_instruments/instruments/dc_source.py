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

from simulated_instruments.instruments.analyzer import none, one
from simulated_instruments.scpi import (
    CommandTree,
    Instrument,
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
        super().__init__()

    def identity(self) -> str:
        return self.state.scenario.dc_identity

    def reset(self) -> None:
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
            self._change(output=parse_boolean(one(p, "output state"), name="output"))

        def measure(which: int):
            def query(s: Session, p: list[str]) -> str:
                none(p)
                st = self.state
                with st.lock:
                    reading = st.bias.measure(st.now())[which]
                    noise = VOLTAGE_NOISE if which == 0 else CURRENT_NOISE
                    return format_number(reading + self.rng.normal(0.0, noise))

            return query

        tree.add(
            "SOURce:VOLTage[:LEVel][:IMMediate][:AMPLitude]",
            set=set_voltage,
            query=lambda s, p: (none(p), format_number(bias.setpoint))[1],
        )
        tree.add(
            "SOURce:CURRent[:LEVel][:IMMediate][:AMPLitude]",
            set=set_current,
            query=lambda s, p: (none(p), format_number(bias.current_limit))[1],
        )
        tree.add(
            "OUTPut[:STATe]",
            set=set_output,
            query=lambda s, p: (none(p), "1" if bias.output else "0")[1],
        )
        tree.add("MEASure[:SCALar]:VOLTage[:DC]", query=measure(0))
        tree.add("MEASure[:SCALar]:CURRent[:DC]", query=measure(1))
