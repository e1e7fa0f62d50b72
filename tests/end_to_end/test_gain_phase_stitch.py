"""A bulk capacitor measured with the gain-phase analyser below 1 MHz and the network
analyser above, over real sockets, and stitched into one curve."""

from __future__ import annotations

import contextlib

import numpy as np

from bench.core.conversions import gain_phase_z, shunt_through_z
from bench.core.gain_phase import impedance_from_gain_phase
from bench.core.impedance import impedance_from_shunt_through
from bench.core.stitch import stitch
from drivers.analyzer import NetworkAnalyzer, SweepPlan
from drivers.bench_control import BenchControl
from drivers.gain_phase import GainPhaseAnalyzer
from drivers.switch import FixtureSwitch
from drivers.transport import VisaTransport

PART = "PB345-7V1/s1"
POSITION = 4


def test_bulk_capacitor_gain_phase_below_vna_above_stitched(sim_bench):
    spec = sim_bench.scenario.gain_phase
    with contextlib.ExitStack() as stack:
        link = {
            name: stack.enter_context(VisaTransport.open(res, timeout_s=5.0))
            for name, res in sim_bench.resources.items()
            if name != "dc_source"
        }
        hands = BenchControl(link["bench"])
        switch = FixtureSwitch(link["switch"], positions=hands.positions())
        vna = NetworkAnalyzer(link["analyzer"])
        gpa = GainPhaseAnalyzer(link["gain_phase"])
        vna.configure(SweepPlan(100e3, 100e6, 31, "log", 100.0, 0.0))
        gpa.configure(SweepPlan(10.0, 1e6, 31, "log", 10.0, 0.0))

        hands.connect_through()
        through = vna.sweep(("S21",))["S21"]
        switch.select(POSITION)
        captured = {}
        for item in ("SHORT", PART):
            hands.place(POSITION, item)
            # The fixture on the network analyser's cables, then on the gain-phase analyser.
            hands.connect_fixture()
            s21 = vna.sweep(("S21",))["S21"] / through
            hands.connect_gain_phase()
            captured[item] = (s21, gpa.ratio())
        f_vna = vna.frequencies()
    f_gpa = captured[PART][1][0]
    z_in = 1 / (1 / spec.input_resistance + 2j * np.pi * f_gpa * spec.input_capacitance)

    low = impedance_from_gain_phase(
        f_gpa,
        captured[PART][1][1],
        r_ref=spec.reference_resistor,
        z_in=z_in,
        mount_short=gain_phase_z(captured["SHORT"][1][1], r_ref=spec.reference_resistor, z_in=z_in),
    )
    high = impedance_from_shunt_through(
        f_vna, captured[PART][0], mount_short=shunt_through_z(captured["SHORT"][0])
    )
    merged = stitch([low, high], ["gain-phase", "network analyser"])
    # The two agree where they overlap (100 kHz to 1 MHz), within their uncertainties.
    assert merged.disagreements == ()
    data = merged.data
    assert data.f[0] == 10.0 and data.f[-1] == 100e6
    truth = sim_bench.scenario.parts[PART].impedance(data.f, 0.0)
    inside = data.inside_window
    # Inside a window from 20 Hz up: at 10 Hz the part (46 Ω) is far above the 1 Ω
    # reference resistor, the ratio is within 2 % of 1 and its error is magnified.
    assert inside[data.f >= 20].all()
    assert not inside[0]
    # Within 5 % of the invented part wherever a set-up measured inside its window: the
    # strap's own 20 µΩ + 8 pH stay in (removed with the short), so not tighter.
    np.testing.assert_allclose(abs(data.z[inside]), abs(truth[inside]), rtol=0.05)
