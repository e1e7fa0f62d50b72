"""The drivers against the simulated bench, over real loopback sockets (pyvisa-py)."""

from __future__ import annotations

import contextlib

import numpy as np
import pytest
import yaml

from drivers.analyzer import NetworkAnalyzer, SweepPlan
from drivers.bench_control import BenchControl
from drivers.command_map import MAPS_DIR, parse_command_map
from drivers.dc_source import DcSource
from drivers.errors import (
    ConnectionLost,
    InstrumentError,
    InstrumentTimeout,
    SafetyLimitError,
    TransportError,
)
from drivers.switch import FixtureSwitch
from drivers.transport import VisaTransport

PLAN = SweepPlan(start_hz=1e3, stop_hz=10e6, points=41, spacing="log", ifbw_hz=1e3,
                 power_dbm=0.0)  # fmt: skip


@pytest.fixture
def links(sim_bench):
    """One open transport per instrument of the running demo bench."""
    with contextlib.ExitStack() as stack:
        yield {
            name: stack.enter_context(VisaTransport.open(resource, timeout_s=5.0))
            for name, resource in sim_bench.resources.items()
        }


def test_configure_reads_back_and_snapshot(links):
    vna = NetworkAnalyzer(links["analyzer"])
    got = vna.configure(PLAN)
    assert got == PLAN
    snap = vna.snapshot()
    assert snap["identity"] == vna.identify() and "," in snap["identity"]
    assert snap["points"] == 41 and snap["spacing"] == "log"
    assert snap["correction"] is False  # off after *RST (simulator README)
    assert snap["sweep_time_s"] > 0
    assert vna.set_correction(True) is True
    assert vna.set_correction(False) is False


def test_through_then_part_gives_the_capacitor_reactance(links, sim_bench):
    vna = NetworkAnalyzer(links["analyzer"])
    hands = BenchControl(links["bench"])
    switch = FixtureSwitch(links["switch"], positions=hands.positions())
    vna.configure(PLAN)

    hands.connect_through()
    assert hands.cables() == "THR"
    through = vna.sweep(("S21",))

    hands.place(2, "MC22-6V3/s1")
    assert hands.placed(2) == "MC22-6V3/s1"
    hands.connect_fixture()
    assert switch.select(2) == 2
    assert switch.selected() == 2
    data = vna.sweep()
    assert data.f.shape == (41,) and data.s.shape == (41, 2, 2)
    np.testing.assert_allclose(data.f[[0, -1]], [1e3, 10e6])
    assert np.all(np.isfinite(data.s))

    # Z = (Z0/2)·S21n/(1 − S21n), docs/design.md §4 / docs/references.md §1 [derived]
    s21n = data["S21"] / through["S21"]
    z = 25.0 * s21n / (1 - s21n)
    truth = sim_bench.state.position_impedance(2, data.f)
    # Through normalisation leaves the (small, low-frequency) mismatch of the error
    # boxes and the ground loop (mΩ) in: compare where |Z| is well above both.
    low = data.f <= 1e5
    np.testing.assert_allclose(abs(z[low]), abs(truth[low]), rtol=0.03)
    # and against the hand formula 1/(2πfC) at 1 kHz for a 22 µF part [derived: 7.234 Ω],
    # loosely, since each sample carries a lot spread
    assert abs(z[0]) == pytest.approx(1 / (2 * np.pi * 1e3 * 22e-6), rel=0.25)


def test_bad_value_surfaces_instrument_error_with_text(links):
    # 1 GHz is inside the default map's limits but above this analyser's 500 MHz
    vna = NetworkAnalyzer(links["analyzer"])
    with pytest.raises(InstrumentError) as info:
        vna.configure(SweepPlan(1e3, 1e9, 11, "linear", 1e3, 0.0))
    assert info.value.code == -222
    assert "out of range" in info.value.text.lower()
    assert info.value.command == "SENSe:FREQuency:STOP 1000000000"


def test_switch_and_bench_accessories(links):
    hands = BenchControl(links["bench"])
    switch = FixtureSwitch(links["switch"], positions=hands.positions())
    switch.select(5)
    switch.select(3)  # break-before-make: 5 is open again
    assert switch.selected() == 3
    switch.open_all()
    assert switch.selected() is None
    hands.transformer(True)
    assert hands.transformer_fitted() is True
    hands.resistors(499)
    assert hands.resistance() == pytest.approx(499)
    hands.resistors(0)
    assert "MC22-6V3/s1" in hands.parts()
    hands.connect_standard("load")
    assert hands.cables() == "STAN,LOAD"
    with pytest.raises(InstrumentError):
        hands.place(1, "NO-SUCH-PART/s1")


def test_dc_bias_on_a_capacitor_then_off(links):
    hands = BenchControl(links["bench"])
    hands.place(1, "MC4U7-10V/s1")
    hands.connect_fixture()
    FixtureSwitch(links["switch"], positions=8).select(1)
    source = DcSource(links["dc_source"], max_voltage=6.3, max_current=0.05)
    with source.biased(3.0, step_v=1.0, dwell_s=0.01, discharge_s=0.01):
        assert source.output_is_on()
        assert source.setpoint() == 3.0
        assert 0.0 < source.measure_voltage() <= 3.0 + 1e-6
    assert not source.output_is_on()
    with pytest.raises(SafetyLimitError):
        source.ramp_to(6.5)


def test_instrument_refuses_a_voltage_beyond_its_own_maximum(links):
    # the caller's limit is above the demo source's 20 V: the instrument's -222 surfaces
    source = DcSource(links["dc_source"], max_voltage=50.0, max_current=0.05)
    with pytest.raises(InstrumentError) as info:
        source.set_voltage(25.0)
    assert info.value.code == -222


def test_injected_error_surfaces_on_next_configuring_write(links):
    hands = BenchControl(links["bench"])
    hands.fault_error("analyzer", -240, "Hardware error")
    with pytest.raises(InstrumentError) as info:
        NetworkAnalyzer(links["analyzer"]).set_correction(False)
    assert info.value.code == -240 and "Hardware error" in info.value.text


def test_delayed_answer_is_a_timeout_and_reopen_resynchronises(links):
    hands = BenchControl(links["bench"])
    link = links["analyzer"]
    vna = NetworkAnalyzer(link)
    identity = vna.identify()
    hands.fault_delay("analyzer", 1.0)
    with link.timeout(0.3), pytest.raises(InstrumentTimeout) as info:
        link.query("SENSe:SWEep:POINts?")
    assert "SENSe:SWEep:POINts?" in str(info.value)
    link.reopen()
    assert vna.identify() == identity  # not the late answer of the old connection


def test_dropped_connection_is_connection_lost(links, sim_bench):
    BenchControl(links["bench"]).fault_drop("analyzer", 0)
    # pyvisa-py notices a closed socket only when the read times out: keep it short
    with links["analyzer"].timeout(0.5), pytest.raises(ConnectionLost):
        NetworkAnalyzer(links["analyzer"]).identify()
    # the instrument is still there: a new connection works
    with VisaTransport.open(sim_bench.resources["analyzer"], timeout_s=2.0) as again:
        assert NetworkAnalyzer(again).identify()


def test_corrupt_block_is_a_transport_error(links):
    vna = NetworkAnalyzer(links["analyzer"])
    vna.configure(PLAN)
    BenchControl(links["bench"]).fault_corrupt_block("analyzer", 1)
    with pytest.raises(TransportError, match="block"):
        vna.sweep(("S21",))
    # the link was cleared: the next sweep reads cleanly
    assert vna.sweep(("S21",))["S21"].shape == (41,)


def test_ascii_dialect_from_a_changed_map(links):
    """The same analyser read in ASCII, by a map that differs only in its data section."""
    raw = yaml.safe_load((MAPS_DIR / "default.yaml").read_text())
    raw["data"].update(format="ascii", format_commands=["FORMat:DATA ASCii"])
    ascii_map = parse_command_map(raw, "ascii.yaml")
    BenchControl(links["bench"]).connect_through()
    binary = NetworkAnalyzer(links["analyzer"])
    binary.configure(PLAN)
    through_binary = binary.sweep(("S21",))
    text = NetworkAnalyzer(links["analyzer"], ascii_map)
    assert text.configure(PLAN) == PLAN
    through_text = text.sweep(("S21",))
    np.testing.assert_array_equal(through_text.f, through_binary.f)
    # two sweeps of the same through differ only by trace noise (0.01 dB RMS in the demo)
    np.testing.assert_allclose(abs(through_text["S21"]), abs(through_binary["S21"]), rtol=5e-3)
