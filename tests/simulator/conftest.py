"""Helpers of the simulator tests: pyvisa-py sessions on a running simulated bench."""

from __future__ import annotations

from collections.abc import Callable, Iterator

import pytest
import pyvisa

from simulated_instruments.server import RunningBench


@pytest.fixture
def open_instrument() -> Iterator[
    Callable[[RunningBench, str], pyvisa.resources.MessageBasedResource]
]:
    """``open_instrument(bench, "analyzer")``: a pyvisa-py SOCKET session with ``\\n``
    read and write termination (REFERENCES §7), closed after the test."""
    rm = pyvisa.ResourceManager("@py")
    opened: list = []

    def open_(bench: RunningBench, name: str, timeout_ms: int = 5000):
        res = rm.open_resource(
            bench.resources[name],
            read_termination="\n",
            write_termination="\n",
            timeout=timeout_ms,
        )
        opened.append(res)
        return res

    yield open_
    for res in opened:
        try:
            res.close()
        except Exception:  # already dropped by a fault test
            pass
    rm.close()
