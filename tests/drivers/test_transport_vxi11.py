"""The VISA transport over VXI-11 (pyvisa-py's TCPIP INSTR session), against the
simulated analyser behind a minimal VXI-11 core channel on loopback."""

from __future__ import annotations

import numpy as np
import pytest

from drivers.analyzer import NetworkAnalyzer, SweepPlan
from drivers.errors import InstrumentTimeout
from drivers.transport import VisaTransport
from simulated_instruments.vxi11 import Vxi11Bridge


@pytest.fixture
def vxi11_resource(sim_bench):
    bridge = Vxi11Bridge(sim_bench.instruments["analyzer"], sim_bench.state)
    try:
        # Naming the port skips the portmapper (port 111), as pyvisa-py allows.
        yield f"TCPIP0::127.0.0.1,{bridge.port}::INSTR"
    finally:
        bridge.stop()


def test_sweep_over_vxi11(vxi11_resource):
    with VisaTransport.open(vxi11_resource, timeout_s=2.0) as link:
        vna = NetworkAnalyzer(link, "default")
        assert "SIM-VNA-0001" in vna.identify()
        plan = SweepPlan(1e3, 1e6, 21, "log", 1e3, 0.0)
        assert vna.configure(plan) == plan
        data = vna.sweep(("S21", "S11"))
    np.testing.assert_allclose(data.f, np.geomspace(1e3, 1e6, 21), rtol=1e-12)
    assert np.all(np.isfinite(data.s[:, 1, 0]))


def test_unanswered_query_over_vxi11_is_a_timeout(vxi11_resource):
    with VisaTransport.open(vxi11_resource, timeout_s=0.3) as link:
        with pytest.raises(InstrumentTimeout):
            link.query("NOSUch:NODE?")
        assert link.query("SYSTem:ERRor:NEXT?").startswith("-113")
