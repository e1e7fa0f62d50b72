"""NetworkAnalyzer: the exact commands it exchanges, with a scripted transport."""

from __future__ import annotations

import copy

import numpy as np
import pytest
import yaml

from drivers.analyzer import NetworkAnalyzer, SweepData, SweepPlan
from drivers.command_map import MAPS_DIR, load_command_map, parse_command_map
from drivers.errors import DriverError, InstrumentError, PlanError, TransportError

OK = ("SYSTem:ERRor:NEXT?", '0,"No error"')
PLAN = SweepPlan(
    start_hz=100.0, stop_hz=100e6, points=201, spacing="log", ifbw_hz=150.0, power_dbm=0.0
)


def readback(start="100", stop="100000000", points="201", spacing="LOG", ifbw="200", power="0"):
    return [
        ("SENSe:SWEep:SPACing?", spacing),
        ("SENSe:FREQuency:STARt?", start),
        ("SENSe:FREQuency:STOP?", stop),
        ("SENSe:SWEep:POINts?", points),
        ("SENSe:BANDwidth:RESolution?", ifbw),
        ("SOURce:POWer:LEVel:IMMediate:AMPLitude?", power),
    ]


def configure_script(present_stop="3000000000", first="start"):
    order = [("SENSe:FREQuency:STARt 100", None), OK, ("SENSe:FREQuency:STOP 100000000", None), OK]
    if first == "stop":
        order = order[2:] + order[:2]
    return [
        ("SENSe:FREQuency:STOP?", present_stop),
        *order,
        ("SENSe:SWEep:POINts 201", None),
        OK,
        ("SENSe:SWEep:SPACing LOGarithmic", None),
        OK,
        ("SENSe:BANDwidth:RESolution 150", None),
        OK,
        ("SOURce:POWer:LEVel:IMMediate:AMPLitude 0", None),
        OK,
        ("FORMat:DATA REAL,64", None),
        OK,
        ("FORMat:BORDer NORMal", None),
        OK,
        *readback(),
    ]


def test_configure_sends_the_plan_and_returns_what_the_instrument_set(expected_protocol):
    with expected_protocol(configure_script()) as link:
        got = NetworkAnalyzer(link, load_command_map("default")).configure(PLAN)
    # the instrument rounded the IF bandwidth from 150 Hz to 200 Hz: the read-back wins
    assert got == SweepPlan(100.0, 100e6, 201, "log", 200.0, 0.0)


def test_configure_moves_stop_first_when_new_start_is_above_present_stop(expected_protocol):
    with expected_protocol(configure_script(present_stop="50", first="stop")) as link:
        NetworkAnalyzer(link).configure(PLAN)


def test_plan_outside_limits_sends_nothing(expected_protocol):
    too_wide = SweepPlan(0.5, 5e9, 30001, "log", 2e6, 20.0)
    with expected_protocol([]) as link, pytest.raises(PlanError) as info:
        NetworkAnalyzer(link).configure(too_wide)
    assert link.sent == []
    message = str(info.value)
    for key in ("start_hz", "stop_hz", "points", "ifbw_hz", "power_dbm", "default.yaml"):
        assert key in message


@pytest.mark.parametrize(
    "kwargs",
    [
        {"start_hz": 10.0, "stop_hz": 5.0},
        {"points": 1},
        {"points": 20.5},
        {"spacing": "logarithmic"},
        {"ifbw_hz": 0.0},
        {"power_dbm": float("nan")},
    ],
)
def test_malformed_plan_is_refused(kwargs):
    values = {
        "start_hz": 100.0,
        "stop_hz": 1e6,
        "points": 11,
        "spacing": "log",
        "ifbw_hz": 10.0,
        "power_dbm": 0.0,
    }
    values.update(kwargs)
    with pytest.raises(PlanError, match="sweep plan"):
        SweepPlan(**values)


def test_instrument_error_surfaces_code_text_and_command(expected_protocol):
    script = [
        ("SENSe:FREQuency:STOP?", "3e9"),
        ("SENSe:FREQuency:STARt 100", None),
        OK,
        ("SENSe:FREQuency:STOP 100000000", None),
        OK,
        ("SENSe:SWEep:POINts 201", None),
        ("SYSTem:ERRor:NEXT?", '-222,"Data out of range"'),
        ("SYSTem:ERRor:NEXT?", '-221,"Settings conflict"'),
        OK,
    ]
    with expected_protocol(script) as link, pytest.raises(InstrumentError) as info:
        NetworkAnalyzer(link).configure(PLAN)
    error = info.value
    assert (error.code, error.text, error.command) == (
        -222,
        "Data out of range",
        "SENSe:SWEep:POINts 201",
    )
    assert error.others == ((-221, "Settings conflict"),)
    assert "-222" in str(error) and "Data out of range" in str(error)


def sweep_script(f, traces, sweep_time="0.5"):
    script = [
        ("SENSe:SWEep:TIME?", sweep_time),
        ("INITiate:IMMediate", None),
        ("*OPC?", "1"),
        OK,
        ("SENSe:FREQuency:DATA?", f),
    ]
    for name, values in traces.items():
        script.append((f"TRACe:DATA? {name}", values))
    return script


def interleave(z: np.ndarray) -> np.ndarray:
    out = np.empty(2 * z.size)
    out[0::2], out[1::2] = z.real, z.imag
    return out


def test_sweep_exchange_and_data(expected_protocol):
    f = np.geomspace(100.0, 1e6, 5)
    s21 = np.array([0.1 + 0.2j, 0.3 - 0.1j, 0.5 + 0j, 0.7 + 0.05j, 0.9 - 0.3j])
    s11 = s21 - 1  # an ideal shunt element: S11 = S21 - 1 (docs/references.md §1 [derived])
    script = sweep_script(f, {"S11": interleave(s11), "S21": interleave(s21)})
    with expected_protocol(script) as link:
        data = NetworkAnalyzer(link).sweep(("S11", "S21"))
    # *OPC? blocks for the sweep: its timeout is 2 × 0.5 s + 10 s from the default map
    opc = link.sent.index("*OPC?")
    assert link.timeouts[opc] == pytest.approx(11.0)
    assert link.timeouts[opc + 1] == pytest.approx(5.0)  # restored afterwards
    assert isinstance(data, SweepData)
    assert data.parameters == ("S11", "S21")
    np.testing.assert_array_equal(data.f, f)
    np.testing.assert_array_equal(data["S21"], s21)
    s = data.s
    assert s.shape == (5, 2, 2)
    np.testing.assert_array_equal(s[:, 1, 0], s21)
    np.testing.assert_array_equal(s[:, 0, 0], s11)
    assert np.isnan(s[:, 0, 1]).all() and np.isnan(s[:, 1, 1]).all()


def test_sweep_reads_all_four_by_default(expected_protocol):
    f = np.array([1e3, 2e3])
    traces = {
        p: interleave(np.array([k + 0.5j, k - 0.5j]))
        for k, p in enumerate(("S11", "S21", "S12", "S22"))
    }
    with expected_protocol(sweep_script(f, traces)) as link:
        data = NetworkAnalyzer(link).sweep()
    np.testing.assert_array_equal(data.s[:, 0, 1], [2 + 0.5j, 2 - 0.5j])  # S12 at [0, 1]


def test_sweep_with_cut_block_is_a_transport_error(expected_protocol):
    f = np.array([1e3, 2e3, 3e3])
    script = sweep_script(f, {"S21": np.zeros(5)})
    with (
        expected_protocol(script) as link,
        pytest.raises(TransportError, match="expected 6 values"),
    ):
        NetworkAnalyzer(link).sweep(("S21",))


def test_sweep_of_unknown_parameter_sends_nothing(expected_protocol):
    with expected_protocol([]) as link, pytest.raises(PlanError, match="S33"):
        NetworkAnalyzer(link).sweep(("S33",))


def test_sweep_error_after_trigger_surfaces(expected_protocol):
    script = [
        ("SENSe:SWEep:TIME?", "0.1"),
        ("INITiate:IMMediate", None),
        ("*OPC?", "1"),
        ("SYSTem:ERRor:NEXT?", '-213,"Init ignored"'),
        OK,
    ]
    with expected_protocol(script) as link, pytest.raises(InstrumentError) as info:
        NetworkAnalyzer(link).sweep(("S21",))
    assert info.value.code == -213 and info.value.command == "INITiate:IMMediate"


def test_correction_and_snapshot(expected_protocol):
    script = [
        ("SENSe:CORRection:STATe OFF", None),
        OK,
        ("SENSe:CORRection:STATe?", "0"),
        *readback(),
        ("*IDN?", "Invented Instruments,VNA-1,0001,1.0"),
        ("SENSe:CORRection:STATe?", "0"),
        ("SENSe:SWEep:TIME?", "0.25"),
    ]
    with expected_protocol(script) as link:
        vna = NetworkAnalyzer(link)
        assert vna.set_correction(False) is False
        snap = vna.snapshot()
    assert snap == {
        "identity": "Invented Instruments,VNA-1,0001,1.0",
        "resource": "FAKE::INSTR",
        "command_map": "default",
        "start_hz": 100.0,
        "stop_hz": 1e8,
        "points": 201,
        "spacing": "log",
        "ifbw_hz": 200.0,
        "power_dbm": 0.0,
        "correction": False,
        "sweep_time_s": 0.25,
    }


def test_unknown_readback_is_a_clear_error(expected_protocol):
    with (
        expected_protocol([("SENSe:CORRection:STATe?", "MAYBE")]) as link,
        pytest.raises(DriverError, match="neither on nor off"),
    ):
        NetworkAnalyzer(link).correction()


def test_another_dialect_is_a_map_not_code(expected_protocol):
    """An ASCII, short-form dialect, described only by a changed map."""
    raw = yaml.safe_load((MAPS_DIR / "default.yaml").read_text())
    other = copy.deepcopy(raw)
    other["name"] = "ascii-short"
    other["common"]["error_query"] = "SYST:ERR?"
    other["sweep"]["time_query"] = "SWE:TIME?"
    other["trigger"]["single"] = "INIT"
    other["data"].update(
        format="ascii",
        format_commands=["FORM ASC"],
        frequency_query="FREQ:DATA?",
        traces={"select_by": "name", "query": "CALC:DATA? {parameter}"},
    )
    cmap = parse_command_map(other, "ascii-short.yaml")
    script = [
        ("SWE:TIME?", "0.01"),
        ("INIT", None),
        ("*OPC?", "1"),
        ("SYST:ERR?", '+0,"No error"'),
        ("FREQ:DATA?", "1e3,2e3"),
        ("CALC:DATA? S21", "0.5,0.0,0.25,-0.25"),
    ]
    with expected_protocol(script) as link:
        data = NetworkAnalyzer(link, cmap).sweep(["S21"])
    np.testing.assert_array_equal(data["S21"], [0.5, 0.25 - 0.25j])


def test_reset(expected_protocol):
    script = [("*RST", None), ("*CLS", None), ("*OPC?", "1"), OK]
    with expected_protocol(script) as link:
        NetworkAnalyzer(link).reset()
