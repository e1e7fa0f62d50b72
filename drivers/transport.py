"""VISA transport: the only module of zbench that touches pyvisa.

:class:`VisaTransport` wraps one pyvisa message-based resource (a LAN socket, VXI-11,
HiSLIP, USBTMC or GPIB instrument; pyvisa-py's ``@py`` backend by default). It adds what
the instruments above need and pyvisa leaves to the caller:

- one error family (:mod:`drivers.errors`) naming the resource and the operation, so a
  caller can tell a timeout from a dropped connection and retry or resume;
- a timeout per operation (``with transport.timeout(120): ...``);
- definite-length binary blocks through pyvisa's own block reader (IEEE 488.2 §8.7.9),
  never a hand-written parser;
- a debug-level log of all traffic on the ``drivers.traffic`` logger.

Instruments receive a transport; they never open one. Anything with the methods of
:class:`Transport` will do, which is how the protocol tests inject a scripted fake.
"""

from __future__ import annotations

import contextlib
import logging
import select
import socket
from collections.abc import Iterator, Sequence
from typing import Any, Protocol

import numpy as np
import pyvisa
from pyvisa import constants
from pyvisa.errors import InvalidBinaryFormat, InvalidSession, VisaIOError

from drivers.errors import (
    ConnectionFailed,
    ConnectionLost,
    InstrumentTimeout,
    TransportError,
)

traffic_log = logging.getLogger("drivers.traffic")

# A device clear drains at most this many unread bytes before it gives up.
MAX_CLEAR_BYTES = 16 * 1024 * 1024

# VISA status codes that mean the link itself is gone (VISA spec VPP-4.3, viRead/viWrite).
_LINK_LOST = {
    constants.StatusCode.error_connection_lost,
    constants.StatusCode.error_io,
    constants.StatusCode.error_closing_failed,
}
_OPEN_FAILED = {
    constants.StatusCode.error_resource_not_found,
    constants.StatusCode.error_resource_busy,
    constants.StatusCode.error_invalid_resource_name,
}


class Transport(Protocol):
    """What an instrument needs from its transport (duck-typed; see :class:`VisaTransport`)."""

    resource_name: str

    def write(self, command: str) -> None: ...

    def query(self, command: str) -> str: ...

    def query_binary(
        self,
        command: str,
        datatype: str = "d",
        big_endian: bool = True,
        *,
        terminated: bool = True,
    ) -> np.ndarray: ...

    def query_ascii_values(self, command: str, separator: str = ",") -> np.ndarray: ...

    def timeout(self, seconds: float) -> contextlib.AbstractContextManager[None]: ...


class VisaTransport:
    """One open VISA message-based resource.

    Use :meth:`open` to make one; it clears the device and checks the link is up. The
    transport is a context manager that closes the resource on exit.
    """

    def __init__(self, resource: Any, resource_name: str, **open_options: Any):
        self._resource = resource
        self.resource_name = resource_name
        self._closed = False
        self._open_options = open_options
        # An exchange cut short by Ctrl-C or a stop signal: its answer may still be on its
        # way, so the next operation clears the link first (_mapped).
        self._interrupted = False

    # -- opening and closing -------------------------------------------------------

    @classmethod
    def open(
        cls,
        resource_name: str,
        *,
        backend: str = "@py",
        timeout_s: float = 5.0,
        read_termination: str | None = "\n",
        write_termination: str = "\n",
        clear: bool = True,
    ) -> VisaTransport:
        """Open ``resource_name`` (e.g. ``TCPIP0::192.0.2.20::5025::SOCKET``).

        ``backend`` is the VISA library (``"@py"`` for pyvisa-py, ``""`` or a path for
        an installed vendor VISA); ``timeout_s`` (s, > 0) is the default per-operation
        timeout. The device is cleared on open (``clear=True``) so that stale bytes from
        an earlier session cannot be mistaken for answers; for pyvisa-py sockets this
        also surfaces a refused connection at once rather than at the first query.
        """
        if not timeout_s > 0:
            raise ValueError(f"timeout_s must be > 0 s, got {timeout_s!r}")
        try:
            manager = pyvisa.ResourceManager(backend)
        except (OSError, ValueError) as exc:
            raise ConnectionFailed(
                resource_name,
                f"load VISA library {backend!r}",
                str(exc),
                hint="install that VISA library, or use backend='@py' (pyvisa-py)",
            ) from exc
        try:
            resource = manager.open_resource(
                resource_name,
                read_termination=read_termination,
                write_termination=write_termination,
                timeout=timeout_s * 1000.0,
            )
        except VisaIOError as exc:
            raise ConnectionFailed(resource_name, "open", exc.description) from exc
        except (OSError, ValueError) as exc:
            raise ConnectionFailed(resource_name, "open", str(exc)) from exc
        transport = cls(
            resource,
            resource_name,
            backend=backend,
            timeout_s=timeout_s,
            read_termination=read_termination,
            write_termination=write_termination,
        )
        transport._disable_nagle()
        if clear:
            try:
                transport.clear()
            except TransportError:
                transport.close()
                raise
        traffic_log.debug("%s opened (timeout %.3g s)", resource_name, timeout_s)
        return transport

    def close(self) -> None:
        """Close the resource; closing twice is harmless."""
        if self._closed:
            return
        self._closed = True
        with contextlib.suppress(VisaIOError, InvalidSession, OSError):
            self._resource.close()
        traffic_log.debug("%s closed", self.resource_name)

    def reopen(self) -> None:
        """Close the connection and open it again with the same options.

        Use it after :class:`~drivers.errors.InstrumentTimeout` or
        :class:`~drivers.errors.ConnectionLost`: an answer that arrives after its timeout
        would otherwise be read as the answer to the next query. A new connection may
        start from the instrument's per-connection defaults (e.g. its data format), so
        configure the instrument again afterwards.
        """
        if not self._open_options:
            raise ConnectionLost(
                self.resource_name, "reopen", "this transport was not made by open()"
            )
        self.close()
        fresh = type(self).open(self.resource_name, **self._open_options)
        self._resource = fresh._resource
        self._closed = False

    def __enter__(self) -> VisaTransport:
        return self

    def __exit__(self, *exc_info: object) -> None:
        self.close()

    @property
    def resource(self) -> Any:
        """The pyvisa resource, for VISA attributes this class does not wrap."""
        return self._resource

    # -- timeouts ------------------------------------------------------------------

    @property
    def timeout_s(self) -> float:
        """Present per-operation timeout, s."""
        return float(self._resource.timeout) / 1000.0

    @timeout_s.setter
    def timeout_s(self, seconds: float) -> None:
        if not seconds > 0:
            raise ValueError(f"timeout must be > 0 s, got {seconds!r}")
        self._resource.timeout = seconds * 1000.0

    @contextlib.contextmanager
    def timeout(self, seconds: float) -> Iterator[None]:
        """Use ``seconds`` (> 0) as the timeout inside the block, then restore the old one."""
        old = self.timeout_s
        self.timeout_s = seconds
        try:
            yield
        finally:
            self._resource.timeout = old * 1000.0

    # -- I/O -----------------------------------------------------------------------

    def clear(self) -> None:
        """Clear the device (VISA viClear): drops any unread answer in the link.

        On a pyvisa-py socket the unread bytes are drained here, for at most
        ``MAX_CLEAR_BYTES``, and a peer that has closed the connection is reported as
        :class:`ConnectionLost` (pyvisa-py's own clear would spin on a closed socket).
        """
        clear_all([self])

    def write(self, command: str) -> None:
        """Send one program message (the write termination is added)."""
        traffic_log.debug("%s << %s", self.resource_name, command)
        with self._mapped(f"write {command!r}"):
            self._resource.write(command)

    def query(self, command: str) -> str:
        """Send ``command`` and return the answer without its termination."""
        traffic_log.debug("%s << %s", self.resource_name, command)
        with self._mapped(f"query {command!r}"):
            answer = self._resource.query(command)
        answer = answer.rstrip("\r\n")
        traffic_log.debug("%s >> %s", self.resource_name, answer)
        return answer

    def query_binary(
        self,
        command: str,
        datatype: str = "d",
        big_endian: bool = True,
        *,
        terminated: bool = True,
    ) -> np.ndarray:
        """Send ``command`` and read an IEEE 488.2 definite-length block (§8.7.9).

        ``datatype`` is a :mod:`struct` code (``"d"`` float64 for ``REAL,64``, ``"f"``
        float32); ``big_endian`` follows ``FORMat:BORDer`` (NORMal = big-endian);
        ``terminated`` says whether the instrument sends the read termination after the
        block (IEEE 488.2 response messages end with one). Returns a 1-D array.
        """
        traffic_log.debug("%s << %s", self.resource_name, command)
        operation = f"query {command!r} (binary block)"
        with self._mapped(operation):
            try:
                values = self._resource.query_binary_values(
                    command,
                    datatype=datatype,
                    is_big_endian=big_endian,
                    container=np.array,
                    header_fmt="ieee",
                    expect_termination=terminated,
                )
            except (InvalidBinaryFormat, ValueError) as exc:
                # A header or length that does not parse: the link now holds an unknown
                # remainder, so clear it before the caller tries again.
                with contextlib.suppress(VisaIOError, OSError):
                    self._resource.clear()
                raise TransportError(
                    self.resource_name,
                    operation,
                    f"expected an IEEE 488.2 definite-length block '#<n><length><bytes>' "
                    f"of {datatype!r} values, found a malformed answer ({exc})",
                    hint="check the data format set on the instrument (command map "
                    "'data' section) matches the one read, then repeat the sweep",
                ) from exc
        values = np.asarray(values, dtype=float)
        traffic_log.debug("%s >> block of %d %r values", self.resource_name, values.size, datatype)
        return values

    def query_ascii_values(self, command: str, separator: str = ",") -> np.ndarray:
        """Send ``command`` and parse a ``separator``-separated list of numbers."""
        answer = self.query(command)
        try:
            return np.array(
                [float(item) for item in answer.split(separator) if item.strip()], dtype=float
            )
        except ValueError as exc:
            raise TransportError(
                self.resource_name,
                f"query {command!r} (ASCII values)",
                f"expected numbers separated by {separator!r}, found {answer[:80]!r}",
                hint="check the data format set on the instrument matches the command map",
            ) from exc

    # -- error mapping -------------------------------------------------------------

    @contextlib.contextmanager
    def _mapped(self, operation: str) -> Iterator[None]:
        """Turn pyvisa and socket failures into :mod:`drivers.errors` types."""
        if self._closed:
            raise ConnectionLost(self.resource_name, operation, "the transport is closed")
        if self._interrupted:
            # Without this, the answer of the exchange cut short would be read as the
            # answer to this one (a ramp-down after Ctrl-C reading "0,No error" as the
            # set-point, say). An answer slower than the clear's quiet window can still
            # come after it; the stop's own fall-backs (the output switched off on a new
            # connection) cover that. A link that fails here fails the operation.
            self._interrupted = False
            clear_all([self])
        try:
            yield
        except KeyboardInterrupt:  # Ctrl-C, or a stop signal (bench.stop_signals)
            self._interrupted = True
            raise
        except VisaIOError as exc:
            if exc.error_code == constants.StatusCode.error_timeout:
                # pyvisa-py reports a socket closed by the peer as a timeout on read;
                # look at the socket so the caller gets the error it can act on.
                if self._peer_closed():
                    raise ConnectionLost(
                        self.resource_name, operation, "the instrument closed the connection"
                    ) from exc
                raise InstrumentTimeout(
                    self.resource_name,
                    operation,
                    f"no answer within {self.timeout_s:.3g} s",
                ) from exc
            if exc.error_code in _LINK_LOST:
                raise ConnectionLost(self.resource_name, operation, exc.description) from exc
            if exc.error_code in _OPEN_FAILED:
                raise ConnectionFailed(self.resource_name, operation, exc.description) from exc
            raise TransportError(self.resource_name, operation, exc.description) from exc
        except InvalidSession as exc:
            raise ConnectionLost(self.resource_name, operation, "the VISA session is gone") from exc
        except ConnectionRefusedError as exc:
            raise ConnectionFailed(self.resource_name, operation, "connection refused") from exc
        except OSError as exc:
            raise ConnectionLost(
                self.resource_name, operation, exc.strerror or exc.__class__.__name__
            ) from exc

    def _socket(self) -> socket.socket | None:
        """The TCP socket under a pyvisa-py session, or None (other backends hide it)."""
        try:
            session = self._resource.visalib.sessions[self._resource.session]
        except (AttributeError, KeyError, TypeError, InvalidSession):
            return None
        sock = getattr(session, "interface", None)
        return sock if isinstance(sock, socket.socket) else None

    def _disable_nagle(self) -> None:
        """Send each message at once (TCP_NODELAY; VISA's default for VI_ATTR_TCPIP_NODELAY).

        Without it, a write followed by a query waits for the peer's delayed ACK (about
        40 ms on Linux) before the query leaves, and every checked write pays that twice.
        pyvisa-py 0.8 does not accept the VISA attribute on SOCKET sessions, so the
        option is set on its socket directly.
        """
        sock = self._socket()
        if sock is None:
            with contextlib.suppress(Exception):  # best effort: only a speed-up
                self._resource.set_visa_attribute(constants.VI_ATTR_TCPIP_NODELAY, True)
            return
        with contextlib.suppress(OSError):
            sock.setsockopt(socket.IPPROTO_TCP, socket.TCP_NODELAY, 1)

    def _peer_closed(self) -> bool:
        """True when the underlying TCP socket (pyvisa-py) was closed by the instrument.

        Other backends hide their socket; for them this is False and a dropped link is
        reported by the backend itself.
        """
        sock = self._socket()
        if sock is None:
            return False
        try:
            readable, _, _ = select.select([sock], [], [], 0)
            if not readable:
                return False
            return sock.recv(1, socket.MSG_PEEK) == b""
        except (OSError, ValueError):
            return True


def clear_all(transports: Sequence[VisaTransport]) -> None:
    """:meth:`VisaTransport.clear` on several transports at once: their sockets are
    drained together until none has sent anything for 0.1 s, so opening a bench of
    instruments waits one quiet window rather than one per instrument."""
    sockets: dict[socket.socket, VisaTransport] = {}
    for transport in transports:
        sock = transport._socket()
        if sock is None:
            with transport._mapped("clear"):
                transport._resource.clear()
            continue
        with contextlib.suppress(Exception):
            session = transport._resource.visalib.sessions[transport._resource.session]
            session._pending_buffer.clear()
        sockets[sock] = transport
    drained = dict.fromkeys(sockets, 0)
    while sockets:
        try:
            readable, _, _ = select.select(list(sockets), [], [], 0.1)
        except OSError as exc:  # a socket closed under us
            first = next(iter(sockets.values()))
            raise ConnectionLost(first.resource_name, "clear", exc.strerror or str(exc)) from exc
        if not readable:
            return
        for sock in readable:
            transport = sockets[sock]
            try:
                chunk = sock.recv(65536)
            except ConnectionRefusedError as exc:
                raise ConnectionFailed(
                    transport.resource_name, "open", exc.strerror or "connection refused"
                ) from exc
            except OSError as exc:
                raise ConnectionLost(
                    transport.resource_name, "clear", exc.strerror or str(exc)
                ) from exc
            if not chunk:
                raise ConnectionLost(
                    transport.resource_name, "clear", "the instrument closed the connection"
                )
            drained[sock] += len(chunk)
            if drained[sock] >= MAX_CLEAR_BYTES:
                raise TransportError(
                    transport.resource_name,
                    "clear",
                    f"the instrument keeps sending (more than {MAX_CLEAR_BYTES} bytes unread)",
                    hint="stop what the instrument is streaming, or power-cycle it",
                )
