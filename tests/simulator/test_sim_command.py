"""``zbench sim``: serves the scenario, prints the resources, stops cleanly on Ctrl-C and
on a termination request."""

from __future__ import annotations

import os
import re
import signal
import subprocess
import sys

import pytest
import pyvisa

from bench.cli import main


def _default_ctrl_c() -> None:
    # A test run started in the background by a script inherits SIGINT ignored, and
    # Python then keeps it so: the child must see Ctrl-C as a terminal would send it.
    signal.signal(signal.SIGINT, signal.SIG_DFL)


@pytest.mark.parametrize("signum", [signal.SIGINT, signal.SIGTERM], ids=["ctrl-c", "SIGTERM"])
def test_sim_serves_and_stops_on_interrupt(signum):
    env = dict(os.environ, PYTHONUNBUFFERED="1")
    proc = subprocess.Popen(
        [sys.executable, "-m", "bench.cli", "sim", "demo", "--port", "0", "--time-scale", "0.001"],
        stdout=subprocess.PIPE,
        stderr=subprocess.PIPE,
        text=True,
        env=env,
        preexec_fn=_default_ctrl_c,
    )
    try:
        resources = {}
        while len(resources) < 4:
            line = proc.stdout.readline()
            assert line, f"sim ended early: {proc.stderr.read()}"
            match = re.match(r"\s+(\w+)\s+(TCPIP0::127\.0\.0\.1::\d+::SOCKET)\s+(.+)", line)
            if match:
                resources[match.group(1)] = match.group(2)
        assert set(resources) == {"analyzer", "switch", "dc_source", "bench"}
        rm = pyvisa.ResourceManager("@py")
        vna = rm.open_resource(
            resources["analyzer"], read_termination="\n", write_termination="\n", timeout=5000
        )
        assert vna.query("*IDN?").startswith("zbench,")
        vna.close()
        rm.close()
        proc.send_signal(signum)
        _, err = proc.communicate(timeout=20)
        assert proc.returncode == 0, err
        assert "stopping" in err
    finally:
        if proc.poll() is None:
            proc.kill()
            proc.communicate()


def test_sim_unknown_scenario_is_a_clear_input_error(capsys):
    assert main(["sim", "no-such-scenario"]) == 2
    err = capsys.readouterr().err
    assert "no-such-scenario" in err and "demo" in err
