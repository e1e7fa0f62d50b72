"""The meas_stim dialect: its exact exchange with a scripted transport, and the same
driver against the simulator speaking it, over a real socket."""

from __future__ import annotations

import contextlib
import dataclasses
import time

import numpy as np
import pytest

from drivers.analyzer import NetworkAnalyzer, SweepPlan
from drivers.bench_control import BenchControl
from drivers.command_map import load_command_map
from drivers.errors import InstrumentError, InstrumentTimeout
from drivers.switch import FixtureSwitch
from drivers.transport import VisaTransport

OK = ("DIAGnostic:ERRor?", '0,"No error"')
PLAN = SweepPlan(start_hz=100.0, stop_hz=1e6, points=5, spacing="log", ifbw_hz=100.0,
                 power_dbm=-10.0)  # fmt: skip


def readback(spacing="LOG"):
    return [
        ("STIMulus:SCALe?", spacing),
        ("STIMulus:FSTart?", "100"),
        ("STIMulus:FSTOp?", "1000000"),
        ("STIMulus:NPOints?", "5"),
        ("RECeiver:IFBW?", "100"),
        ("STIMulus:LEVel?", "-10"),
    ]


CONFIGURE = [
    ("STIMulus:FSTOp?", "500000000"),
    ("STIMulus:FSTart 100", None),
    OK,
    ("STIMulus:FSTOp 1000000", None),
    OK,
    ("STIMulus:NPOints 5", None),
    OK,
    ("STIMulus:SCALe LOGarithmic", None),
    OK,
    ("RECeiver:IFBW 100", None),
    OK,
    ("STIMulus:LEVel -10", None),
    OK,
    ("DATA:ENCoding FLOat32", None),
    OK,
    ("DATA:ORDer LSBFirst", None),
    OK,
    *readback(),
]


def interleave(z):
    out = np.empty(2 * z.size)
    out[0::2], out[1::2] = z.real, z.imag
    return out


class NoSleep(NetworkAnalyzer):
    """The driver with its poll interval not slept, so the script runs at once."""

    def _sleep(self, seconds: float) -> None:
        self.slept = getattr(self, "slept", 0) + 1


def test_meas_stim_configure_and_sweep_exchange(expected_protocol):
    s21 = np.array([0.1 + 0.2j, 0.3 - 0.1j, 0.5, 0.7 + 0.05j, 0.9 - 0.3j])
    s11 = s21 - 1
    script = [
        *CONFIGURE,
        ("RECeiver:DURation?", "0.25"),
        ("STATus:SWEep:CLEar", None),
        ("RUN:SINGle", None),
        ("STATus:SWEep:EVENt?", "0"),  # still sweeping
        ("STATus:SWEep:EVENt?", "1"),  # another bit: not the one of the mask
        ("STATus:SWEep:EVENt?", "2"),  # bit 1: done
        OK,
        ("MEASure2:DEFine S21", None),
        OK,
        ("MEASure2:VALues?", interleave(s21).astype(np.float32).astype(float)),
        ("MEASure1:DEFine S11", None),
        OK,
        ("MEASure1:VALues?", interleave(s11).astype(np.float32).astype(float)),
    ]
    with expected_protocol(script) as link:
        vna = NoSleep(link, load_command_map("meas_stim"))
        assert vna.configure(PLAN) == PLAN
        data = vna.sweep(("S21", "S11"))
    assert vna.slept == 2
    # 4-byte floats, least significant byte first, as the map says
    assert link.block_formats == [("f", False), ("f", False)]
    # no stimulus query: the frequencies are the log grid of the read-back set-up
    np.testing.assert_allclose(data.f, np.geomspace(100.0, 1e6, 5), rtol=1e-15)
    np.testing.assert_allclose(data["S21"], s21, rtol=1e-6)
    np.testing.assert_allclose(data["S11"], s11, rtol=1e-6)
    # the poll waited as long as the sweep allowed: 2 × 0.25 s + 10 s, no blocking query
    assert max(link.timeouts) == 5.0


def test_meas_stim_frequencies_follow_the_read_back_set_up(expected_protocol):
    """Without a configure in this session the set-up is read before the sweep's data."""
    script = [
        ("RECeiver:DURation?", "0.01"),
        ("STATus:SWEep:CLEar", None),
        ("RUN:SINGle", None),
        ("STATus:SWEep:EVENt?", "2"),
        OK,
        *readback(spacing="LIN"),
        ("MEASure2:DEFine S21", None),
        OK,
        ("MEASure2:VALues?", np.zeros(10)),
    ]
    with expected_protocol(script) as link:
        data = NoSleep(link, "meas_stim").sweep(("S21",))
    np.testing.assert_allclose(data.f, np.linspace(100.0, 1e6, 5))


def test_meas_stim_poll_is_bounded_by_the_sweep_time(expected_protocol):
    cmap = load_command_map("meas_stim")
    script = [
        ("RECeiver:DURation?", "0"),
        ("STATus:SWEep:CLEar", None),
        ("RUN:SINGle", None),
    ] + [("STATus:SWEep:EVENt?", "1")] * 400

    class Slow(NetworkAnalyzer):
        def _sleep(self, seconds: float) -> None:
            time.sleep(0.001)

    short = dataclasses.replace(cmap, timeout_margin_s=0.05)
    # The script is left unfinished on purpose: the driver gives up before its end.
    with (
        pytest.raises(InstrumentTimeout, match="STATus:SWEep:EVENt"),
        expected_protocol(script) as link,
    ):
        Slow(link, short).sweep(("S21",))
    assert 3 < len(link.sent) < len(script)


def test_meas_stim_own_error_code_is_explained(expected_protocol):
    script = [
        ("RECeiver:DURation?", "0"),
        ("STATus:SWEep:CLEar", None),
        ("RUN:SINGle", None),
        ("STATus:SWEep:EVENt?", "2"),
        ("DIAGnostic:ERRor?", '202,"No sweep data"'),
        OK,
    ]
    with expected_protocol(script) as link, pytest.raises(InstrumentError) as info:
        NoSleep(link, "meas_stim").sweep(("S21",))
    assert info.value.code == 202 and info.value.text == "No sweep data"
    assert "run a sweep before reading values" in str(info.value)


@pytest.fixture
def meas_stim_links(sim_bench_factory):
    bench = sim_bench_factory("demo_meas_stim")
    with contextlib.ExitStack() as stack:
        yield (
            bench,
            {
                name: stack.enter_context(VisaTransport.open(resource, timeout_s=5.0))
                for name, resource in bench.resources.items()
            },
        )


def test_meas_stim_against_the_simulator(meas_stim_links):
    bench, links = meas_stim_links
    vna = NetworkAnalyzer(links["analyzer"], "meas_stim")
    plan = SweepPlan(1e3, 10e6, 41, "log", 1e3, 0.0)
    assert vna.configure(plan) == plan
    assert "SIM-VNA-0002" in vna.snapshot()["identity"]
    hands = BenchControl(links["bench"])
    switch = FixtureSwitch(links["switch"], positions=hands.positions())
    hands.connect_through()
    through = vna.sweep(("S21",))
    hands.place(2, "MC22-6V3/s1")
    hands.connect_fixture()
    switch.select(2)
    data = vna.sweep(("S11", "S21"))
    np.testing.assert_allclose(data.f[[0, -1]], [1e3, 10e6])
    # Z = (Z0/2)·S21n/(1 − S21n), docs/references.md §1 [derived]
    s21n = data["S21"] / through["S21"]
    z = 25.0 * s21n / (1 - s21n)
    truth = bench.state.position_impedance(2, data.f)
    low = data.f <= 1e5
    np.testing.assert_allclose(abs(z[low]), abs(truth[low]), rtol=0.03)


def test_meas_stim_refuses_the_default_dialect(meas_stim_links):
    """The default map against this instrument: its first query names no node, so no
    answer comes; the instrument's error queue then says why, in its own words."""
    bench, _ = meas_stim_links
    with VisaTransport.open(bench.resources["analyzer"], timeout_s=0.3) as link:
        with pytest.raises(InstrumentTimeout, match="SENSe:FREQuency:STOP"):
            NetworkAnalyzer(link, "default").configure(SweepPlan(1e3, 1e6, 11))
        # No answer was sent, so nothing late can arrive: the same connection (whose
        # error queue it is) is read on.
        vna = NetworkAnalyzer(link, "meas_stim")
        entries = vna.drain_errors()
    assert entries and entries[0][0] == -113 and "Undefined header" in entries[0][1]
