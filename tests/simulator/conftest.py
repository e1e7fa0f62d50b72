"""Helpers of the simulator tests: pyvisa-py sessions on a running simulated bench."""

from __future__ import annotations

import contextlib
from collections.abc import Callable, Iterator
from typing import Any

import numpy as np
import pytest
import pyvisa

from simulated_instruments.server import RunningBench


@pytest.fixture
def open_instrument() -> Iterator[
    Callable[[RunningBench, str], pyvisa.resources.MessageBasedResource]
]:
    """``open_instrument(bench, "analyzer")``: a pyvisa-py SOCKET session with ``\\n``
    read and write termination (docs/references.md §7), closed after the test."""
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
        with contextlib.suppress(Exception):  # already dropped by a fault test
            res.close()
    rm.close()


class BenchClient:
    """A scripted operator and analyser client talking raw SCPI through pyvisa-py."""

    def __init__(self, bench: RunningBench, open_instrument: Callable[..., Any]):
        self.bench = bench
        self.vna = open_instrument(bench, "analyzer")
        self.switch = open_instrument(bench, "switch")
        self.dc = open_instrument(bench, "dc_source")
        self.hands = open_instrument(bench, "bench")
        self.vna.write("*RST;*CLS;:FORMat:DATA REAL,64;:FORMat:BORDer NORMal")

    def configure(
        self,
        start: float,
        stop: float,
        points: int,
        *,
        spacing: str = "LOG",
        ifbw: float = 1e3,
        power: float = 0.0,
    ) -> None:
        self.vna.write(
            f"SENS:FREQ:STAR {start!r};STOP {stop!r};:SENS:SWE:POIN {points};"
            f"SPAC {spacing};:SENS:BAND {ifbw!r};:SOUR:POW {power!r}"
        )
        self.check(self.vna)

    def sweep(self) -> tuple[np.ndarray, np.ndarray]:
        """One single sweep: frequencies (Hz) and raw S (n, 2, 2)."""
        self.vna.write("INITiate:IMMediate")
        assert self.vna.query("*OPC?") == "1"
        f = self.vna.query_binary_values(
            "SENS:FREQ:DATA?", datatype="d", is_big_endian=True, container=np.array
        )
        s = np.empty((len(f), 2, 2), dtype=complex)
        for name, (i, j) in {"S11": (0, 0), "S21": (1, 0), "S12": (0, 1), "S22": (1, 1)}.items():
            pairs = self.vna.query_binary_values(
                f"TRAC:DATA? {name}", datatype="d", is_big_endian=True, container=np.array
            )
            s[:, i, j] = pairs[0::2] + 1j * pairs[1::2]
        self.check(self.vna)
        return f, s

    def do(self, command: str) -> None:
        self.hands.write(command)
        self.check(self.hands)

    def select(self, position: int) -> None:
        self.switch.write(f"ROUT:CLOS (@{position})")
        assert self.switch.query("*OPC?") == "1"
        self.check(self.switch)

    @staticmethod
    def check(inst: Any) -> None:
        answer = inst.query("SYST:ERR?")
        assert answer == '0,"No error"', answer


@pytest.fixture
def bench_client(open_instrument: Callable[..., Any]) -> Callable[[RunningBench], BenchClient]:
    """``bench_client(bench)``: a :class:`BenchClient` on that bench's four instruments."""

    def make(bench: RunningBench) -> BenchClient:
        return BenchClient(bench, open_instrument)

    return make
