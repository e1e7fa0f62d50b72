"""DC source: hard limits never exceeded, ramps, and a biased block that always ends off."""

from __future__ import annotations

import contextlib
import math

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from drivers.dc_source import DcSource
from drivers.errors import InstrumentError, SafetyLimitError

ERR = "SYSTem:ERRor:NEXT?"
OK = (ERR, '0,"No error"')
VOLT = "SOURce:VOLTage:LEVel:IMMediate:AMPLitude"


class FakeDcInstrument:
    """A stateful stand-in for a DC source: keeps its state, records every command."""

    resource_name = "FAKE::DC"

    def __init__(self, voltage: float = 0.0):
        self.voltage = voltage
        self.output = False
        self.current_limit: float | None = None
        self.voltages_sent: list[float] = []
        self.commands: list[str] = []
        self.fail_next_voltage = False
        self._errors: list[str] = []

    def write(self, command: str) -> None:
        self.commands.append(command)
        head, _, argument = command.partition(" ")
        if head == VOLT:
            value = float(argument)
            self.voltages_sent.append(value)
            if self.fail_next_voltage:
                self.fail_next_voltage = False
                self._errors.append('-222,"Data out of range"')
                return
            self.voltage = value
        elif head == "SOURce:CURRent:LEVel":
            self.current_limit = float(argument)
        elif head == "OUTPut:STATe":
            assert argument in ("ON", "OFF")
            self.output = argument == "ON"
        else:
            raise AssertionError(f"unexpected command {command!r}")

    def query(self, command: str) -> str:
        self.commands.append(command)
        if command == ERR:
            return self._errors.pop(0) if self._errors else '0,"No error"'
        answers = {
            f"{VOLT}?": repr(self.voltage),
            "OUTPut:STATe?": "1" if self.output else "0",
            "MEASure:VOLTage?": repr(self.voltage if self.output else 0.0),
            "MEASure:CURRent?": "1e-06" if self.output else "0",
        }
        return answers[command]

    @contextlib.contextmanager
    def timeout(self, seconds):
        yield


def test_biased_block_exact_exchange(expected_protocol):
    sleeps: list[float] = []
    script = [
        ("SOURce:CURRent:LEVel 0.01", None), OK,
        (f"{VOLT}?", "0"),
        ("OUTPut:STATe ON", None), OK,
        (f"{VOLT} 1", None), OK,
        (f"{VOLT} 2", None), OK,
        ("MEASure:VOLTage?", "1.9998"),
        (f"{VOLT} 1", None), OK,
        (f"{VOLT} 0", None), OK,
        ("OUTPut:STATe OFF", None), OK,
    ]  # fmt: skip
    with expected_protocol(script) as link:
        source = DcSource(link, max_voltage=6.3, max_current=0.05, sleep=sleeps.append)
        with source.biased(2.0, current_limit=0.01, step_v=1.0, dwell_s=0.1, discharge_s=0.5):
            assert source.measure_voltage() == pytest.approx(1.9998)
    assert sleeps == [0.1, 0.1, 0.1, 0.1, 0.5]  # a dwell per ramp step, then the discharge


def test_request_beyond_limit_sends_nothing(expected_protocol):
    with expected_protocol([]) as link:
        source = DcSource(link, max_voltage=6.3, max_current=0.05)
        for bad in (6.31, -0.1, math.nan, math.inf):
            with pytest.raises(SafetyLimitError, match="nothing was sent"):
                source.set_voltage(bad)
            with pytest.raises(SafetyLimitError):
                source.ramp_to(bad)
            with pytest.raises(SafetyLimitError), source.biased(bad):
                pass
        with pytest.raises(SafetyLimitError, match="current limit"):
            source.set_current_limit(0.051)
        with pytest.raises(SafetyLimitError):
            source.ramp_to(1.0, step_v=0.0)
        for tiny in (1e-300, 1e-4):  # would take (nearly) for ever
            with pytest.raises(SafetyLimitError, match="larger step"):
                source.ramp_to(6.0, step_v=tiny)
            with (
                pytest.raises(SafetyLimitError, match="larger step"),
                source.biased(1.0, step_v=tiny),
            ):
                pass
    assert link.sent == []


@pytest.mark.parametrize("bad", [0.0, -1.0, math.inf, math.nan, True])
def test_limits_must_be_positive_and_finite(bad):
    with pytest.raises(SafetyLimitError):
        DcSource(FakeDcInstrument(), max_voltage=bad, max_current=0.1)
    with pytest.raises(SafetyLimitError):
        DcSource(FakeDcInstrument(), max_voltage=5.0, max_current=bad)


def test_setpoint_left_above_limit_is_brought_down_without_exceeding_it():
    fake = FakeDcInstrument(voltage=20.0)
    source = DcSource(fake, max_voltage=5.0, max_current=0.1, sleep=lambda s: None)
    source.ramp_to(0.0, step_v=1.0)
    # the ramp is planned from the limit (5 V), so its first step is already below it
    assert fake.voltages_sent == [4.0, 3.0, 2.0, 1.0, 0.0]
    assert fake.voltage == 0.0


def test_exception_in_block_ramps_down_and_switches_off():
    fake = FakeDcInstrument()
    source = DcSource(fake, max_voltage=10.0, max_current=0.1, sleep=lambda s: None)
    with pytest.raises(RuntimeError, match="sweep failed"), source.biased(5.0, step_v=2.0):
        assert fake.output and fake.voltage == 5.0
        raise RuntimeError("sweep failed")
    assert not fake.output
    assert fake.voltage == 0.0
    assert fake.commands[-1].startswith(ERR) or fake.commands[-1] == "OUTPut:STATe OFF"


def test_instrument_error_in_ramp_down_still_switches_off():
    fake = FakeDcInstrument()
    source = DcSource(fake, max_voltage=10.0, max_current=0.1, sleep=lambda s: None)
    with pytest.raises(InstrumentError), source.biased(4.0, step_v=2.0):
        fake.fail_next_voltage = True  # the first ramp-down step is refused
    assert not fake.output


# One random call: (name, argument, argument); voltages drawn well past the limits.
voltages = st.one_of(
    st.floats(min_value=-20, max_value=40, allow_nan=False),
    st.sampled_from([math.nan, math.inf, -math.inf, 0.0, 12.0]),
)
calls = st.one_of(
    st.tuples(st.just("set"), voltages, st.just(0.0)),
    st.tuples(st.just("ramp"), voltages, st.floats(min_value=-1, max_value=10)),
    st.tuples(st.just("limit"), st.floats(min_value=-1, max_value=1), st.just(0.0)),
    st.tuples(st.just("on"), st.just(0.0), st.just(0.0)),
    st.tuples(st.just("off"), st.just(0.0), st.just(0.0)),
    st.tuples(st.just("measure"), st.just(0.0), st.just(0.0)),
    st.tuples(st.just("raise"), st.just(0.0), st.just(0.0)),
)


class BodyError(Exception):
    pass


def run_call(source: DcSource, call) -> None:
    name, a, b = call
    try:
        if name == "set":
            source.set_voltage(a)
        elif name == "ramp":
            source.ramp_to(a, step_v=b, dwell_s=0.0)
        elif name == "limit":
            source.set_current_limit(a)
        elif name == "on":
            source.output_on()
        elif name == "off":
            source.output_off()
        elif name == "measure":
            source.measure_voltage()
            source.measure_current()
        elif name == "raise":
            raise BodyError
    except SafetyLimitError:
        pass


@settings(max_examples=150, deadline=None)
@given(
    limit=st.floats(min_value=0.5, max_value=25.0),
    start_voltage=st.floats(min_value=0.0, max_value=30.0),
    bias=voltages,
    before=st.lists(calls, max_size=8),
    body=st.lists(calls, max_size=8),
)
def test_property_limit_never_exceeded_and_output_off_at_the_end(
    limit, start_voltage, bias, before, body
):
    """Whatever is asked: no voltage above the limit is ever sent, and a biased block
    ends with the output off, however it is left."""
    fake = FakeDcInstrument(voltage=start_voltage)
    source = DcSource(fake, max_voltage=limit, max_current=0.2, sleep=lambda s: None)
    for call in before:
        with contextlib.suppress(BodyError):
            run_call(source, call)
    try:
        with source.biased(bias, step_v=limit / 3, dwell_s=0.0, discharge_s=0.0):
            for call in body:
                run_call(source, call)
    except (SafetyLimitError, BodyError):
        pass
    assert all(0.0 <= v <= limit for v in fake.voltages_sent), fake.voltages_sent
    if 0.0 <= bias <= limit:  # a valid bias: the block ran and must have cleaned up
        assert not fake.output
        assert fake.voltage == 0.0
