"""VisaTransport over real loopback sockets (pyvisa-py), with servers the tests control."""

from __future__ import annotations

import logging
import signal
import socket
import struct
import time

import numpy as np
import pytest
from pyvisa import constants

from drivers.errors import (
    ConnectionFailed,
    ConnectionLost,
    InstrumentTimeout,
    TransportError,
)
from drivers.transport import VisaTransport


def ieee_block(values: np.ndarray, big_endian: bool = True) -> bytes:
    """A definite-length block '#<n><len><bytes>' (IEEE Std 488.2 §8.7.9, clause
    number from memory; docs/references.md §7), built by hand."""
    payload = struct.pack((">" if big_endian else "<") + f"{values.size}d", *values)
    length = str(len(payload)).encode()
    return b"#" + str(len(length)).encode() + length + payload


def echo_server(loopback_server, extra=None):
    def respond(line: bytes):
        if extra is not None:
            answer = extra(line)
            if answer is not None:
                return answer
        if line == b"*IDN?":
            return b"Invented Instruments,VNA-1,0001,1.0\n"
        if line.endswith(b"?"):
            return b"ECHO " + line + b"\n"
        return None

    return loopback_server(respond)


def test_query_and_write_round_trip_and_traffic_log(loopback_server, caplog):
    server = echo_server(loopback_server)
    caplog.set_level(logging.DEBUG, logger="drivers.traffic")
    with VisaTransport.open(server.resource, timeout_s=2.0) as link:
        assert link.query("*IDN?") == "Invented Instruments,VNA-1,0001,1.0"
        link.write("SENSe:SWEep:POINts 201")
        assert link.query("SENSe:SWEep:POINts?") == "ECHO SENSe:SWEep:POINts?"
    assert b"SENSe:SWEep:POINts 201" in server.received
    traffic = "\n".join(r.getMessage() for r in caplog.records if r.name == "drivers.traffic")
    assert f"{server.resource} << *IDN?" in traffic
    assert f"{server.resource} >> Invented Instruments" in traffic
    assert "SENSe:SWEep:POINts 201" in traffic


@pytest.mark.parametrize("big_endian", [True, False])
def test_binary_block_with_newline_bytes_inside(loopback_server, big_endian):
    # 201 complex points as REAL,64: 2*201*8 = 3216 bytes -> header '#43216'
    # (docs/references.md §7: IEEE Std 488.2 §8.7.9 definite-length block [published, clause
    # number from memory]; arithmetic derived here).
    rng = np.random.default_rng(4)
    values = rng.normal(size=402)
    # 0x0a0a0a0a0a0a0a0a as a float64: a value whose bytes are all '\n', so a reader that
    # stopped at the termination character would cut the block.
    values[7] = struct.unpack(">d", b"\n" * 8)[0]
    block = ieee_block(values, big_endian)
    assert block.startswith(b"#43216")

    server = echo_server(
        loopback_server, lambda line: block + b"\n" if line == b"TRACe:DATA? S21" else None
    )
    with VisaTransport.open(server.resource, timeout_s=2.0) as link:
        got = link.query_binary("TRACe:DATA? S21", "d", big_endian)
        np.testing.assert_array_equal(got, values)
        # the link is in step afterwards: the trailing newline was consumed
        assert link.query("*IDN?").startswith("Invented Instruments")


def test_ascii_values(loopback_server):
    server = echo_server(
        loopback_server, lambda line: b"1.0,2.5e3,-4\n" if line == b"DATA?" else None
    )
    with VisaTransport.open(server.resource, timeout_s=2.0) as link:
        np.testing.assert_array_equal(link.query_ascii_values("DATA?"), [1.0, 2500.0, -4.0])
        with pytest.raises(TransportError, match="expected numbers"):
            link.query_ascii_values("WHAT?")


def test_malformed_block_is_a_clear_error_and_link_recovers(loopback_server):
    server = echo_server(
        loopback_server, lambda line: b"1.0,2.0,3.0\n" if line == b"TRACe:DATA? S11" else None
    )
    with VisaTransport.open(server.resource, timeout_s=1.0) as link:
        with pytest.raises(TransportError) as info:
            link.query_binary("TRACe:DATA? S11")
        message = str(info.value)
        assert server.resource in message
        assert "TRACe:DATA? S11" in message
        assert "definite-length block" in message
        assert link.query("*IDN?").startswith("Invented Instruments")


def test_timeout_names_resource_and_operation_and_is_restored(loopback_server):
    server = echo_server(loopback_server, lambda line: b"" if line == b"SLOW?" else None)
    with VisaTransport.open(server.resource, timeout_s=3.0) as link:
        with link.timeout(0.2), pytest.raises(InstrumentTimeout) as info:
            link.query("SLOW?")
        assert server.resource in str(info.value)
        assert "SLOW?" in str(info.value)
        assert link.timeout_s == pytest.approx(3.0)
        # the instrument is still there: after a timeout the next exchange works
        assert link.query("*IDN?").startswith("Invented Instruments")


def late_answer(delay_s: float):
    """A responder that answers ``SLOW?`` with ``late answer`` after ``delay_s``."""

    def respond(line: bytes):
        if line == b"SLOW?":
            time.sleep(delay_s)
            return b"late answer\n"
        return None

    return respond


def test_reopen_after_timeout_discards_the_late_answer(loopback_server):
    server = echo_server(loopback_server, late_answer(0.4))
    with VisaTransport.open(server.resource, timeout_s=2.0) as link:
        with link.timeout(0.1), pytest.raises(InstrumentTimeout):
            link.query("SLOW?")
        # without the reopen, this query would read "late answer"
        link.reopen()
        assert link.query("*IDN?").startswith("Invented Instruments")
        assert link.timeout_s == pytest.approx(2.0)


def test_an_exchange_cut_short_by_ctrl_c_is_cleared_before_the_next(loopback_server):
    # Ctrl-C (or a stop signal) while a query waits for its answer: the answer still
    # arrives, and without a clear the next query (a stop's ramp-down asking for the
    # set-point, say) would read it as its own.
    def interrupt(signum, frame):
        raise KeyboardInterrupt

    server = echo_server(loopback_server, late_answer(0.3))
    previous = signal.signal(signal.SIGALRM, interrupt)
    try:
        with VisaTransport.open(server.resource, timeout_s=2.0) as link:
            signal.setitimer(signal.ITIMER_REAL, 0.1)
            with pytest.raises(KeyboardInterrupt):
                link.query("SLOW?")
            time.sleep(0.4)  # the late answer is in the link now
            assert link.query("*IDN?").startswith("Invented Instruments")
            assert link.query("*IDN?").startswith("Invented Instruments")
    finally:
        signal.setitimer(signal.ITIMER_REAL, 0)
        signal.signal(signal.SIGALRM, previous)


def test_connection_closed_by_instrument_is_connection_lost(loopback_server):
    server = echo_server(loopback_server, lambda line: server.CLOSE if line == b"*OPC?" else None)
    with VisaTransport.open(server.resource, timeout_s=0.5) as link:
        assert link.query("*IDN?").startswith("Invented Instruments")
        with pytest.raises(ConnectionLost) as info:
            link.query("*OPC?")
        assert "closed the connection" in str(info.value)


def test_connection_refused_on_open():
    with socket.socket() as probe:  # a port nobody listens on
        probe.bind(("127.0.0.1", 0))
        port = probe.getsockname()[1]
    resource = f"TCPIP0::127.0.0.1::{port}::SOCKET"
    with pytest.raises(ConnectionFailed) as info:
        VisaTransport.open(resource, timeout_s=0.5)
    assert resource in str(info.value)
    assert "refused" in str(info.value)


def test_use_after_close_is_connection_lost(loopback_server):
    server = echo_server(loopback_server)
    link = VisaTransport.open(server.resource, timeout_s=1.0)
    link.close()
    link.close()  # twice is harmless
    with pytest.raises(ConnectionLost, match="closed"):
        link.query("*IDN?")


def test_messages_leave_at_once(loopback_server):
    # TCP_NODELAY, VISA's default for VI_ATTR_TCPIP_NODELAY: without it each query
    # after a write waits for the peer's delayed ACK
    server = echo_server(loopback_server)
    with VisaTransport.open(server.resource, timeout_s=1.0) as link:
        state = link.resource.get_visa_attribute(constants.VI_ATTR_TCPIP_NODELAY)
        assert state == constants.VisaBoolean.true


def test_bad_timeout_is_refused(loopback_server):
    server = echo_server(loopback_server)
    with pytest.raises(ValueError, match="timeout"):
        VisaTransport.open(server.resource, timeout_s=0)


def test_open_on_a_peer_that_closes_at_once_is_connection_lost(closing_peer):
    """A listener that accepts and closes at once: the clear on open must not spin."""
    with pytest.raises(ConnectionLost, match="closed the connection"):
        VisaTransport.open(closing_peer, timeout_s=1.0)
