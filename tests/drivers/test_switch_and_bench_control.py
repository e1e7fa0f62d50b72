"""Fixture switch and bench-control client: exact exchanges with a scripted transport."""

from __future__ import annotations

import pytest

from drivers.bench_control import BenchControl
from drivers.errors import DriverError, InstrumentError, PlanError
from drivers.switch import FixtureSwitch

OK = ("SYSTem:ERRor:NEXT?", '0,"No error"')


def test_select_is_break_before_make_and_read_back(expected_protocol):
    script = [
        ("ROUTe:OPEN:ALL", None),
        OK,
        ("ROUTe:CLOSe (@3)", None),
        ("*OPC?", "1"),
        OK,
        ("ROUTe:CLOSe? (@3)", "1"),
    ]
    with expected_protocol(script) as link:
        assert FixtureSwitch(link, 4, settle_timeout_s=2.5).select(3) == 3
    assert link.timeouts[link.sent.index("*OPC?")] == 2.5  # waits for the relay to settle


def test_select_that_does_not_close_is_an_error(expected_protocol):
    script = [
        ("ROUTe:OPEN:ALL", None),
        OK,
        ("ROUTe:CLOSe (@1)", None),
        ("*OPC?", "1"),
        OK,
        ("ROUTe:CLOSe? (@1)", "0"),
    ]
    with expected_protocol(script) as link, pytest.raises(DriverError, match="did not close"):
        FixtureSwitch(link, 2).select(1)


def test_select_outside_positions_sends_nothing(expected_protocol):
    with expected_protocol([]) as link, pytest.raises(PlanError, match=r"\[1, 2, 3, 4\]"):
        FixtureSwitch(link, 4).select(5)


def test_selected(expected_protocol):
    script = [("ROUTe:CLOSe? (@1)", "0"), ("ROUTe:CLOSe? (@2)", "1"), ("ROUTe:CLOSe? (@3)", "0")]
    with expected_protocol(script) as link:
        assert FixtureSwitch(link, 3).selected() == 2
    none = [("ROUTe:CLOSe? (@5)", "0"), ("ROUTe:CLOSe? (@7)", "0")]
    with expected_protocol(none) as link:
        assert FixtureSwitch(link, [5, 7]).selected() is None
    two = [("ROUTe:CLOSe? (@1)", "1"), ("ROUTe:CLOSe? (@2)", "1")]
    with expected_protocol(two) as link, pytest.raises(DriverError, match="together"):
        FixtureSwitch(link, 2).selected()


def test_open_all_error_surfaces(expected_protocol):
    script = [("ROUTe:OPEN:ALL", None), ("SYSTem:ERRor:NEXT?", '-240,"Hardware error"'), OK]
    with expected_protocol(script) as link, pytest.raises(InstrumentError) as info:
        FixtureSwitch(link, 2).open_all()
    assert info.value.code == -240 and info.value.text == "Hardware error"


def test_bench_control_commands(expected_protocol):
    script = [
        ("OPERator:CABLes STANdard,SHORt", None), OK,
        ("OPERator:CABLes STANdard,LOAD", None), OK,
        ("OPERator:CABLes THRough", None), OK,
        ("OPERator:CABLes FIXTure", None), OK,
        ("OPERator:CABLes?", "FIXT"),
        ("OPERator:CABLes GAINphase", None), OK,
        ("OPERator:MOUNt SERies,STRAp", None), OK,
        ("OPERator:MOUNt REFLection,\"FB1/s2\"", None), OK,
        ("OPERator:PLACe 2,SHORt", None), OK,
        ("OPERator:PLACe 1,\"MLCC-A/s1\"", None), OK,
        ("OPERator:PLACe 3,EMPTy", None), OK,
        ("OPERator:PLACe? 1", '"MLCC-A/s1"'),
        ("OPERator:TRANsformer ON", None), OK,
        ("OPERator:RESistors 450", None), OK,
        ("OPERator:RESistors 0", None), OK,
    ]  # fmt: skip
    with expected_protocol(script) as link:
        hands = BenchControl(link)
        hands.connect_standard("short")
        hands.connect_standard("LOAD")
        hands.connect_through()
        hands.connect_fixture()
        assert hands.cables() == "FIXT"
        hands.connect_gain_phase()
        hands.mount("series-through", "strap")
        hands.mount("reflection", "FB1/s2")
        hands.place(2, "short")
        hands.place(1, "MLCC-A/s1")
        hands.place(3, "empty")
        assert hands.placed(1) == "MLCC-A/s1"
        hands.transformer(True)
        hands.resistors(450)
        hands.resistors(0)


@pytest.mark.parametrize(
    ("call", "args"),
    [
        ("connect_standard", ("match",)),
        ("place", (0, "short")),
        ("place", (1, "no-slash")),
        ("place", (1, "strap")),
        ("mount", ("series-through", "short")),
        ("mount", ("series-through", "a/b/c")),
        ("place", (1, 'a"b/c')),
        ("resistors", (-1.0,)),
        ("resistors", (float("inf"),)),
    ],
)
def test_bench_control_refuses_bad_requests_without_sending(expected_protocol, call, args):
    with expected_protocol([]) as link, pytest.raises(PlanError):
        getattr(BenchControl(link), call)(*args)


def test_unknown_part_error_from_the_bench_surfaces(expected_protocol):
    script = [
        ('OPERator:PLACe 1,"NOPE/s1"', None),
        ("SYSTem:ERRor:NEXT?", '-224,"Illegal parameter value"'),
        OK,
    ]
    with (
        expected_protocol(script) as link,
        pytest.raises(InstrumentError, match="Illegal parameter value"),
    ):
        BenchControl(link).place(1, "NOPE/s1")


def test_bench_queries_and_fault_helpers(expected_protocol):
    script = [
        ("OPERator:TRANsformer?", "1"),
        ("OPERator:RESistors?", "499"),
        ("OPERator:POSitions?", "8"),
        ("OPERator:PARTs?", '"MC22-6V3/s1,FB137/s2"'),
        ("FAULt:DELay ANALyzer,2.5,1", None), OK,
        ("FAULt:DROP SWITch,3", None), OK,
        ("FAULt:BLOCk ANALyzer,2", None), OK,
        ("FAULt:ERRor DCSource,-240,\"overtemperature\"", None), OK,
        ("FAULt:ERRor ANALyzer,-350", None), OK,
        ("FAULt:MISSing 4,ON", None), OK,
        ("FAULt:LIST?", '"delay analyzer 2.5 s x1"'),
        ("FAULt:CLEar", None), OK,
    ]  # fmt: skip
    with expected_protocol(script) as link:
        hands = BenchControl(link)
        assert hands.transformer_fitted() is True
        assert hands.resistance() == 499.0
        assert hands.positions() == 8
        assert hands.parts() == ["MC22-6V3/s1", "FB137/s2"]
        hands.fault_delay("analyzer", 2.5)
        hands.fault_drop("switch", 3)
        hands.fault_corrupt_block("analyzer", 2)
        hands.fault_error("dc_source", -240, "overtemperature")
        hands.fault_error("analyzer", -350)
        hands.fault_missing(4)
        assert hands.faults() == "delay analyzer 2.5 s x1"
        hands.clear_faults()


def test_fault_on_unknown_instrument_sends_nothing(expected_protocol):
    with expected_protocol([]) as link, pytest.raises(PlanError, match="oscilloscope"):
        BenchControl(link).fault_delay("oscilloscope", 1.0)
