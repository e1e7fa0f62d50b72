"""A minimal VXI-11 core channel in front of a simulated instrument, on loopback.

It exists so that zbench's VISA transport can be tested over VXI-11
(``TCPIP0::127.0.0.1,<port>::INSTR``; naming the port skips the portmapper on port 111).
It is built on the ONC RPC server of pyvisa-py (``pyvisa_py.protocols.rpc``) and answers
the core procedures a VISA client uses: create_link (10), device_write (11), device_read
(12), device_readstb (13), device_clear (15) and destroy_link (23), numbered as the
VXI-11 specification gives them (VXI-11 rev. 1.0, §B.6, from memory). Locking, abort
and interrupt channels are not served. One client at a time.
"""

from __future__ import annotations

import socket
import threading
import time

from pyvisa_py.protocols import rpc, vxi11

from simulated_instruments.scpi import Instrument, Session
from simulated_instruments.state import BenchState

ERR_NONE = 0
ERR_IO_TIMEOUT = 15
MAX_RECV = 1 << 20
# A query without an answer: the longest the bridge waits before answering "timeout".
MAX_WAIT_S = 2.0


class Vxi11Bridge(rpc.TCPServer):
    """The VXI-11 core channel of ``instrument``; ``port`` is where it listens."""

    def __init__(self, instrument: Instrument, state: BenchState, host: str = "127.0.0.1"):
        super().__init__(host, vxi11.DEVICE_CORE_PROG, vxi11.DEVICE_CORE_VERS, 0)
        self.instrument = instrument
        self.state = state
        self.port = self.sock.getsockname()[1]
        self.scpi = Session(name=f"{instrument.name}@vxi11")
        self.pending = b""
        self.output = b""
        self.stopping = threading.Event()
        self.sock.listen(1)
        self.sock.settimeout(0.1)
        self.thread = threading.Thread(target=self._serve, name="sim-vxi11", daemon=True)
        self.thread.start()

    def _serve(self) -> None:
        while not self.stopping.is_set():
            try:
                conn, _ = self.sock.accept()
            except (TimeoutError, OSError):
                continue
            conn.settimeout(None)
            with conn:
                self._client(conn)

    def _client(self, conn: socket.socket) -> None:
        """One client: RPC records in, replies out, until it closes."""
        while not self.stopping.is_set():
            try:
                call = rpc._recvrecord(conn, None)
            except (EOFError, OSError):
                return
            reply = self.handle(call)
            if reply is not None:
                try:
                    rpc._sendrecord(conn, reply)
                except OSError:
                    return

    def stop(self) -> None:
        self.stopping.set()
        self.thread.join(timeout=2)
        self.sock.close()

    # -- procedures (args unpacked, then turn_around(), then the reply packed) ------------

    def handle_10(self) -> None:  # create_link
        u = self.unpacker
        u.unpack_int(), u.unpack_bool(), u.unpack_uint(), u.unpack_string()
        self.turn_around()
        self.scpi = Session(name=f"{self.instrument.name}@vxi11")
        self.state.register_session(self.instrument.name, self.scpi)
        self.pending, self.output = b"", b""
        p = self.packer
        p.pack_int(ERR_NONE)
        p.pack_int(1)  # link id
        p.pack_uint(0)  # no abort channel
        p.pack_uint(MAX_RECV)

    def handle_11(self) -> None:  # device_write
        u = self.unpacker
        u.unpack_int(), u.unpack_uint(), u.unpack_uint()
        flags = u.unpack_int()
        data = u.unpack_opaque()
        self.turn_around()
        self.pending += data
        if flags & vxi11.OP_FLAG_END or self.pending.endswith(b"\n"):
            for line in self.pending.split(b"\n"):
                text = line.rstrip(b"\r").decode("latin-1")
                if text.strip():
                    responses = self.instrument.execute(self.scpi, text)
                    if responses:
                        parts = [r if isinstance(r, bytes) else r.encode() for r in responses]
                        self.output += b";".join(parts) + b"\n"
            self.pending = b""
        self.packer.pack_int(ERR_NONE)
        self.packer.pack_uint(len(data))

    def handle_12(self) -> None:  # device_read
        u = self.unpacker
        u.unpack_int()
        request_size = u.unpack_uint()
        io_timeout_ms = u.unpack_uint()
        u.unpack_uint(), u.unpack_int(), u.unpack_int()
        self.turn_around()
        deadline = time.monotonic() + min(io_timeout_ms / 1000.0, MAX_WAIT_S)
        while not self.output and time.monotonic() < deadline:
            time.sleep(0.005)
        p = self.packer
        if not self.output:
            p.pack_int(ERR_IO_TIMEOUT)
            p.pack_int(0)
            p.pack_opaque(b"")
            return
        chunk, self.output = self.output[:request_size], self.output[request_size:]
        p.pack_int(ERR_NONE)
        p.pack_int(vxi11.RX_END if not self.output else vxi11.RX_REQCNT)
        p.pack_opaque(chunk)

    def handle_13(self) -> None:  # device_readstb
        self._generic()
        self.packer.pack_int(ERR_NONE)
        self.packer.pack_uint(self.scpi.status_byte())

    def handle_15(self) -> None:  # device_clear
        self._generic()
        self.pending, self.output = b"", b""
        self.packer.pack_int(ERR_NONE)

    def handle_23(self) -> None:  # destroy_link
        self.unpacker.unpack_int()
        self.turn_around()
        self.packer.pack_int(ERR_NONE)

    def _generic(self) -> None:
        u = self.unpacker
        u.unpack_int(), u.unpack_int(), u.unpack_uint(), u.unpack_uint()
        self.turn_around()
