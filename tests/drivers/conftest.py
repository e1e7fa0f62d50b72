"""Test helpers of the driver tests.

``expected_protocol`` injects a scripted transport: the exact (command, answer) pairs an
instrument must exchange, in order; the test fails on any other command and on any pair
left unused. ``loopback_server`` starts a tiny TCP server on 127.0.0.1 whose answers a
test chooses, so :class:`~drivers.transport.VisaTransport` is tested over a real socket.
"""

from __future__ import annotations

import contextlib
import socket
import threading
from collections.abc import Callable, Iterator
from typing import Any

import numpy as np
import pytest

ERR_QUERY = "SYSTem:ERRor:NEXT?"
NO_ERROR = (ERR_QUERY, '0,"No error"')


class ScriptedTransport:
    """A fake transport that replays a script of (command, answer) pairs.

    ``answer`` is None for a write, a string for a query, an array for a block query,
    or an exception instance to raise. Every command is logged in :attr:`sent`, with
    the timeout in force in :attr:`timeouts`.
    """

    resource_name = "FAKE::INSTR"

    def __init__(self, pairs: list[tuple[str, Any]]):
        self.pairs = list(pairs)
        self.index = 0
        self.sent: list[str] = []
        self.timeouts: list[float] = []
        self.timeout_s = 5.0
        self.block_formats: list[tuple[str, bool]] = []

    def _next(self, kind: str, command: str) -> Any:
        self.sent.append(command)
        self.timeouts.append(self.timeout_s)
        if self.index >= len(self.pairs):
            raise AssertionError(f"unexpected {kind} {command!r}: the script is finished")
        expected, answer = self.pairs[self.index]
        if command != expected:
            raise AssertionError(
                f"step {self.index}: expected {expected!r}, instrument got {kind} {command!r}"
            )
        self.index += 1
        if isinstance(answer, BaseException):
            raise answer
        return answer

    def write(self, command: str) -> None:
        answer = self._next("write", command)
        assert answer is None, f"{command!r} is a write in the script but has an answer"

    def query(self, command: str) -> str:
        answer = self._next("query", command)
        assert isinstance(answer, str), f"{command!r} should answer text, script has {answer!r}"
        return answer

    def query_binary(self, command, datatype="d", big_endian=True, *, terminated=True):
        answer = self._next("binary query", command)
        self.block_formats.append((datatype, big_endian))
        assert isinstance(answer, np.ndarray), f"{command!r}: script answer is not an array"
        return answer

    def query_ascii_values(self, command, separator=","):
        answer = self._next("ASCII query", command)
        return np.array([float(x) for x in answer.split(separator)])

    @contextlib.contextmanager
    def timeout(self, seconds: float) -> Iterator[None]:
        old, self.timeout_s = self.timeout_s, seconds
        try:
            yield
        finally:
            self.timeout_s = old

    def assert_all_consumed(self) -> None:
        left = self.pairs[self.index :]
        assert not left, f"{len(left)} expected command(s) never sent, first: {left[0][0]!r}"


@pytest.fixture
def expected_protocol() -> Callable[[list[tuple[str, Any]]], Any]:
    """``with expected_protocol(pairs) as transport:`` — fails if a pair is left unused."""

    @contextlib.contextmanager
    def make(pairs: list[tuple[str, Any]]) -> Iterator[ScriptedTransport]:
        transport = ScriptedTransport(pairs)
        yield transport
        transport.assert_all_consumed()

    return make


class LoopbackServer:
    """One-connection-at-a-time TCP server on 127.0.0.1 that answers lines.

    ``respond(line: bytes) -> bytes | None`` gives the bytes to send back (None: send
    nothing); returning the sentinel ``CLOSE`` closes the connection instead.
    """

    CLOSE = b"\x00close"

    def __init__(self, respond: Callable[[bytes], bytes | None]):
        self.respond = respond
        self.received: list[bytes] = []
        self._sock = socket.socket(socket.AF_INET, socket.SOCK_STREAM)
        self._sock.setsockopt(socket.SOL_SOCKET, socket.SO_REUSEADDR, 1)
        self._sock.bind(("127.0.0.1", 0))
        self._sock.listen(4)
        self._sock.settimeout(0.1)
        self.port = self._sock.getsockname()[1]
        self.resource = f"TCPIP0::127.0.0.1::{self.port}::SOCKET"
        self._stop = threading.Event()
        self._thread = threading.Thread(target=self._serve, daemon=True)
        self._thread.start()

    def _serve(self) -> None:
        while not self._stop.is_set():
            try:
                conn, _ = self._sock.accept()
            except (TimeoutError, OSError):
                continue
            with conn:
                conn.settimeout(0.1)
                buffer = b""
                while not self._stop.is_set():
                    try:
                        data = conn.recv(65536)
                    except TimeoutError:
                        continue
                    except OSError:
                        break
                    if not data:
                        break
                    buffer += data
                    closed = False
                    while b"\n" in buffer:
                        line, buffer = buffer.split(b"\n", 1)
                        self.received.append(line)
                        answer = self.respond(line)
                        if answer == self.CLOSE:
                            closed = True
                            break
                        if answer:
                            conn.sendall(answer)
                    if closed:
                        break

    def stop(self) -> None:
        self._stop.set()
        self._thread.join(timeout=2)
        self._sock.close()


@pytest.fixture
def loopback_server() -> Iterator[Callable[[Callable[[bytes], bytes | None]], LoopbackServer]]:
    """Factory of :class:`LoopbackServer`; every server started is stopped afterwards."""
    servers: list[LoopbackServer] = []

    def start(respond: Callable[[bytes], bytes | None]) -> LoopbackServer:
        server = LoopbackServer(respond)
        servers.append(server)
        return server

    yield start
    for server in servers:
        server.stop()


@pytest.fixture
def closing_peer() -> Iterator[str]:
    """VISA resource of a listener that accepts one connection and closes it at once."""
    listener = socket.socket()
    listener.bind(("127.0.0.1", 0))
    listener.listen(1)
    port = listener.getsockname()[1]

    def accept_and_close() -> None:
        with contextlib.suppress(OSError):
            conn, _ = listener.accept()
            conn.close()

    thread = threading.Thread(target=accept_and_close, daemon=True)
    thread.start()
    yield f"TCPIP0::127.0.0.1::{port}::SOCKET"
    listener.close()
    thread.join(timeout=2)
