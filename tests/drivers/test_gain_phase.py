"""The gain-phase analyser driver: its exact exchange, and against the simulated one."""

from __future__ import annotations

import contextlib

import numpy as np
import pytest

from bench.core.conversions import gain_phase_z
from drivers.analyzer import NetworkAnalyzer, SweepPlan
from drivers.bench_control import BenchControl
from drivers.errors import CommandMapError
from drivers.gain_phase import GainPhaseAnalyzer
from drivers.switch import FixtureSwitch
from drivers.transport import VisaTransport

OK = ("SYSTem:ERRor:NEXT?", '0,"No error"')


def test_gain_phase_exchange(expected_protocol):
    script = [
        ("SWEep:STOP?", "30000000"),
        ("SWEep:STARt 10", None),
        OK,
        ("SWEep:STOP 1000", None),
        OK,
        ("SWEep:POINts 3", None),
        OK,
        ("SWEep:MODE LOGarithmic", None),
        OK,
        ("RECeiver:BANDwidth 10", None),
        OK,
        ("OUTPut:LEVel 0", None),
        OK,
        ("DATA:FORMat ASCii", None),
        OK,
        ("SWEep:MODE?", "LOG"),
        ("SWEep:STARt?", "10"),
        ("SWEep:STOP?", "1000"),
        ("SWEep:POINts?", "3"),
        ("RECeiver:BANDwidth?", "10"),
        ("OUTPut:LEVel?", "0"),
        ("SWEep:DURation?", "1.5"),
        ("SWEep:RUN", None),
        ("*OPC?", "1"),
        OK,
        ("DATA:FREQuency?", "10,100,1000"),
        ("DATA:TRACe? RATIO", "0.9,-0.1,0.5,-0.3,0.1,-0.2"),
    ]
    with expected_protocol(script) as link:
        gpa = GainPhaseAnalyzer(link)
        gpa.configure(SweepPlan(10.0, 1e3, 3, "log", 10.0, 0.0))
        f, h = gpa.ratio()
    np.testing.assert_array_equal(f, [10, 100, 1000])
    np.testing.assert_array_equal(h, [0.9 - 0.1j, 0.5 - 0.3j, 0.1 - 0.2j])
    # the completion query waited as long as the sweep may take: 2 × 1.5 s + 10 s
    assert link.timeouts[link.sent.index("*OPC?")] == pytest.approx(13.0)


def test_maps_of_the_other_kind_are_refused(expected_protocol):
    with expected_protocol([]) as link:
        with pytest.raises(CommandMapError, match="gain_phase"):
            NetworkAnalyzer(link, "gain_phase")
        with pytest.raises(CommandMapError, match="network"):
            GainPhaseAnalyzer(link, "default")


def test_simulated_gain_phase_analyser_measures_the_bulk_capacitor(sim_bench):
    spec = sim_bench.scenario.gain_phase
    with contextlib.ExitStack() as stack:
        links = {
            name: stack.enter_context(VisaTransport.open(sim_bench.resources[name]))
            for name in ("gain_phase", "switch", "bench")
        }
        hands = BenchControl(links["bench"])
        hands.place(4, "PB345-7V1/s1")
        hands.connect_gain_phase()
        assert hands.cables() == "GAIN"
        FixtureSwitch(links["switch"], positions=hands.positions()).select(4)
        gpa = GainPhaseAnalyzer(links["gain_phase"])
        assert "SIM-GPA-0001" in gpa.identify()
        gpa.configure(SweepPlan(10.0, 1e6, 31, "log", 10.0, 0.0))
        f, h = gpa.ratio()
    z_in = 1 / (1 / spec.input_resistance + 2j * np.pi * f * spec.input_capacitance)
    z = gain_phase_z(h, r_ref=spec.reference_resistor, z_in=z_in)
    truth = sim_bench.state.position_impedance(4, f) - sim_bench.state.ground_loop(f)
    # |Z| from 48 Ω at 10 Hz down to the part's ESR (mΩ): within 2 % where the ratio is
    # well above the receivers' floor, which is all of this band at 0 dBm.
    np.testing.assert_allclose(abs(z), abs(truth), rtol=0.02)
    # the ratio is not an S21: at 10 Hz a 345 µF part reads near 1, not near 0
    assert abs(h[0]) > 0.9


def test_the_fixture_is_on_one_analyser_at_a_time(sim_bench):
    """The gain-phase analyser sees the fixture only once the hands have moved it there
    (before, an open: its ratio B/A near 1); the network analyser's cable ends are then
    open (no transmission across an empty position)."""
    with contextlib.ExitStack() as stack:
        links = {
            name: stack.enter_context(VisaTransport.open(sim_bench.resources[name]))
            for name in ("analyzer", "gain_phase", "switch", "bench")
        }
        hands = BenchControl(links["bench"])
        FixtureSwitch(links["switch"], positions=hands.positions()).select(4)
        gpa = GainPhaseAnalyzer(links["gain_phase"])
        gpa.configure(SweepPlan(100.0, 10e3, 5, "log", 100.0, 0.0))
        vna = NetworkAnalyzer(links["analyzer"])
        vna.configure(SweepPlan(100e3, 10e6, 5, "log", 1e3, 0.0))
        hands.place(4, "short")
        hands.connect_fixture()
        open_ratio = np.median(abs(gpa.ratio()[1]))
        hands.connect_gain_phase()
        strap_ratio = np.median(abs(gpa.ratio()[1]))
        hands.place(4, "empty")
        away = np.median(abs(vna.sweep(("S21",))["S21"]))
        hands.connect_fixture()
        across = np.median(abs(vna.sweep(("S21",))["S21"]))
    # Ratio zp/(r_ref + zp) with r_ref 1 Ω: near 1 for an open, about 1e-3 for a strap of
    # milliohms (derived from the divider).
    assert open_ratio > 0.9 and strap_ratio < 0.05
    # An empty shunt position passes the line through (|S21| near 1); open cable ends pass
    # nothing.
    assert across > 0.5 and away < 0.1
