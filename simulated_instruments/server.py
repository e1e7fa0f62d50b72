"""One process, several instruments, one TCP port each, on 127.0.0.1.

:func:`start_bench` builds the bench of a scenario, starts one listening socket per
instrument (port 0: the OS chooses) and serves every connection in its own background
thread, so several clients can talk at once. Messages end with ``\\n`` (a ``\\r`` before
it is ignored); answers end with ``\\n``, the answers of several queries in one message
joined by ``;``. A line longer than :data:`MAX_LINE` bytes is discarded with ``-363``;
bytes that are not printable ASCII give ``-101``. Nothing a client sends can stop the
server or reach another client's session.
"""

from __future__ import annotations

import contextlib
import select
import socket
import threading
import time
from collections.abc import Mapping
from pathlib import Path
from typing import Any

from simulated_instruments.faults import corrupt_block_header
from simulated_instruments.instruments import ANALYZERS, BenchControl, DcSource, Switch
from simulated_instruments.instruments.gain_phase import GainPhaseAnalyzer
from simulated_instruments.scenario import Scenario, load_scenario
from simulated_instruments.scpi import Instrument, Session, no_input_pending
from simulated_instruments.state import BenchState

HOST = "127.0.0.1"
MAX_LINE = 64 * 1024
ORDER = ("analyzer", "switch", "dc_source", "bench", "gain_phase")


def resource_string(port: int, host: str = HOST) -> str:
    """VISA resource of a raw SCPI socket: ``TCPIP0::127.0.0.1::<port>::SOCKET``."""
    return f"TCPIP0::{host}::{port}::SOCKET"


class _Connection:
    """One client connection of one instrument, served in its own thread."""

    def __init__(self, server: _InstrumentServer, sock: socket.socket, peer: Any):
        self.server = server
        self.sock = sock
        self.buffer = b""
        self.discarding = False
        self.session = Session(name=f"{server.instrument.name}@{peer}")
        self.session.input_pending = self._input_pending
        server.state.register_session(server.instrument.name, self.session)

    def _input_pending(self) -> bool:
        if b"\n" in self.buffer:
            return True
        try:
            readable, _, _ = select.select([self.sock], [], [], 0)
        except (OSError, ValueError):
            return False
        return bool(readable)

    def serve(self) -> None:
        sock = self.sock
        try:
            sock.settimeout(0.2)
            while not self.server.stopping.is_set():
                try:
                    data = sock.recv(65536)
                except TimeoutError:
                    continue
                except OSError:
                    break
                if not data:
                    break  # client gone; a partial line dies with it
                self.buffer += data
                if not self._handle_lines():
                    break
        finally:
            with contextlib.suppress(OSError):
                sock.close()
            self.server.forget(self)

    def _handle_lines(self) -> bool:
        """Run every complete line in the buffer; False when the connection must close."""
        while True:
            index = self.buffer.find(b"\n")
            if index < 0:
                if len(self.buffer) > MAX_LINE:
                    if not self.discarding:
                        self.session.push_error(-363, f"line longer than {MAX_LINE} bytes")
                    self.discarding = True
                    self.buffer = b""
                return True
            line, self.buffer = self.buffer[:index], self.buffer[index + 1 :]
            if self.discarding:
                self.discarding = False  # the end of the over-long line
                continue
            if len(line) > MAX_LINE:
                self.session.push_error(-363, f"line longer than {MAX_LINE} bytes")
                continue
            if not self._handle_line(line):
                return False

    def _handle_line(self, raw: bytes) -> bool:
        text = raw.rstrip(b"\r").decode("latin-1")
        if not text.strip():
            return True
        name = self.server.instrument.name
        faults = self.server.state.faults
        if "?" in text and faults.take_drop(name):
            return False
        responses = self.server.instrument.execute(self.session, text)
        if not responses:
            return True
        parts = [r if isinstance(r, bytes) else r.encode("ascii", "replace") for r in responses]
        message = b";".join(parts) + b"\n"
        if any(isinstance(r, bytes) for r in responses) and faults.take_corrupt_block(name):
            message = corrupt_block_header(message)
        delay = faults.take_delay(name)
        if delay > 0:
            deadline = time.monotonic() + delay
            while time.monotonic() < deadline and not self.server.stopping.is_set():
                time.sleep(min(0.05, max(0.0, deadline - time.monotonic())))
        try:
            self.sock.sendall(message)
        except OSError:
            return False
        return True


class _InstrumentServer:
    """A listening socket for one instrument and the threads of its connections."""

    def __init__(self, instrument: Instrument, state: BenchState, port: int, host: str):
        self.instrument = instrument
        self.state = state
        self.stopping = threading.Event()
        self.listener = socket.socket(socket.AF_INET, socket.SOCK_STREAM)
        self.listener.setsockopt(socket.SOL_SOCKET, socket.SO_REUSEADDR, 1)
        try:
            self.listener.bind((host, port))
        except OSError:
            self.listener.close()
            raise
        self.listener.listen(16)
        self.listener.settimeout(0.1)
        self.port = self.listener.getsockname()[1]
        self.host = host
        self.connections: set[_Connection] = set()
        self.lock = threading.Lock()
        self.thread = threading.Thread(
            target=self._accept_loop, name=f"sim-{instrument.name}", daemon=True
        )
        self.threads: list[threading.Thread] = []

    def start(self) -> None:
        self.thread.start()

    def _accept_loop(self) -> None:
        while not self.stopping.is_set():
            try:
                sock, peer = self.listener.accept()
            except TimeoutError:
                continue
            except OSError:
                if self.stopping.is_set():
                    break
                time.sleep(0.01)
                continue
            try:
                sock.setsockopt(socket.IPPROTO_TCP, socket.TCP_NODELAY, 1)
                conn = _Connection(self, sock, peer)
            except Exception:  # never let one bad connection stop the listener
                with contextlib.suppress(OSError):
                    sock.close()
                continue
            with self.lock:
                self.connections.add(conn)
                self.threads = [t for t in self.threads if t.is_alive()]
                thread = threading.Thread(
                    target=conn.serve, name=f"sim-{self.instrument.name}-client", daemon=True
                )
                self.threads.append(thread)
            thread.start()

    def forget(self, conn: _Connection) -> None:
        with self.lock:
            self.connections.discard(conn)
        self.state.unregister_session(self.instrument.name, conn.session)
        conn.session.input_pending = no_input_pending  # break the reference cycle

    def stop(self) -> None:
        self.stopping.set()
        with contextlib.suppress(OSError):
            self.listener.close()
        if self.thread.is_alive():
            self.thread.join(timeout=2)
        with self.lock:
            conns = list(self.connections)
            threads = list(self.threads)
        for conn in conns:
            with contextlib.suppress(OSError):
                conn.sock.shutdown(socket.SHUT_RDWR)
        for thread in threads:
            thread.join(timeout=2)


class RunningBench:
    """A simulated bench serving on loopback; a context manager that stops it on exit.

    ``resources`` maps ``analyzer``, ``switch``, ``dc_source`` and ``bench`` to their
    VISA resource strings; ``ports`` to their TCP ports; ``state`` is the shared physical
    state (for tests that need the truth); ``scenario`` the loaded scenario.
    """

    def __init__(
        self, scenario: Scenario, state: BenchState, servers: dict[str, _InstrumentServer]
    ):
        self.scenario = scenario
        self.state = state
        self._servers = servers
        self.ports = {name: srv.port for name, srv in servers.items()}
        self.resources = {
            name: resource_string(srv.port, srv.host) for name, srv in servers.items()
        }
        self.instruments = {name: srv.instrument for name, srv in servers.items()}
        self._stopped = False

    def stop(self) -> None:
        """Close every socket and join the server threads (idempotent)."""
        if self._stopped:
            return
        self._stopped = True
        self.state.stopping.set()
        for server in self._servers.values():
            server.stop()

    def __enter__(self) -> RunningBench:
        return self

    def __exit__(self, *exc: object) -> None:
        self.stop()


def _ports(ports: Mapping[str, int] | int | None) -> dict[str, int]:
    if ports is None:
        return dict.fromkeys(ORDER, 0)
    if isinstance(ports, int):
        if ports == 0:
            return dict.fromkeys(ORDER, 0)
        return {name: ports + i for i, name in enumerate(ORDER)}
    unknown = set(ports) - set(ORDER)
    if unknown:
        raise ValueError(f"unknown instrument(s) in ports: {sorted(unknown)}; use {list(ORDER)}")
    return {name: int(ports.get(name, 0)) for name in ORDER}


def start_bench(
    scenario: str | Path | Mapping[str, Any] = "demo",
    *,
    ports: Mapping[str, int] | int | None = None,
    time_scale: float = 1.0,
    seed: int | None = None,
    host: str = HOST,
) -> RunningBench:
    """Start the simulated bench of ``scenario`` on loopback and return it running.

    ``scenario``: a name under ``simulated_instruments/scenarios/``, a path to a YAML
    file, or a mapping. ``ports``: None or 0 (OS-chosen ports), a base port (the
    instruments on base, base+1, ... in the order analyzer, switch, dc_source, bench and,
    when the scenario has one, gain_phase), or a mapping of instrument name to port (0 for
    OS-chosen).
    ``time_scale`` (> 0) multiplies every simulated duration (sweeps, relay settling,
    charging), so 0.001 makes a 4 s sweep take 4 ms. ``seed`` overrides the scenario's.
    """
    sc = load_scenario(scenario, seed=seed)
    state = BenchState(sc, time_scale=time_scale)
    instruments: dict[str, Instrument] = {
        "analyzer": ANALYZERS[sc.analyzer.dialect](state),
        "switch": Switch(state),
        "dc_source": DcSource(state),
        "bench": BenchControl(state),
    }
    if sc.gain_phase is not None:
        instruments["gain_phase"] = GainPhaseAnalyzer(state, sc.gain_phase)
    servers: dict[str, _InstrumentServer] = {}
    try:
        for name, port in _ports(ports).items():
            if name not in instruments:
                continue
            servers[name] = _InstrumentServer(instruments[name], state, port, host)
    except OSError:
        for srv in servers.values():
            srv.stop()
        raise
    for srv in servers.values():
        srv.start()
    return RunningBench(sc, state, servers)
