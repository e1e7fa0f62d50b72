"""Garbage, binary noise, over-long lines, disconnects, faults and several clients at once."""

from __future__ import annotations

import socket
import threading

import numpy as np
import pytest
import pyvisa

from simulated_instruments.server import MAX_LINE


def raw_client(bench, name: str) -> socket.socket:
    sock = socket.create_connection(("127.0.0.1", bench.ports[name]), timeout=5)
    sock.setsockopt(socket.IPPROTO_TCP, socket.TCP_NODELAY, 1)
    return sock


def ask(sock: socket.socket, line: bytes) -> bytes:
    """Send one line, read one answer line (ASCII answers only)."""
    sock.sendall(line + b"\n")
    answer = b""
    while not answer.endswith(b"\n"):
        chunk = sock.recv(65536)
        assert chunk, "server closed the connection"
        answer += chunk
    return answer[:-1]


def errors(sock: socket.socket) -> list[bytes]:
    found = []
    for _ in range(25):
        answer = ask(sock, b"SYST:ERR?")
        if answer.startswith(b"0,"):
            return found
        found.append(answer)
    raise AssertionError("error queue does not drain")


def test_garbage_binary_noise_and_long_lines_give_errors_not_a_dead_server(sim_bench):
    sock = raw_client(sim_bench, "analyzer")
    sock.sendall(b"\x00\xff\xfe garbage \x07\n")
    sock.sendall(b"FREQ:STAR 1 2 3 4;;;\n")
    sock.sendall(b"\r\n\n")  # empty lines are nothing
    sock.sendall(bytes(range(256)) + b"\n")
    sock.sendall(b"X" * (MAX_LINE + 10))
    sock.sendall(b"still the long line\n")
    codes = [e.split(b",")[0] for e in errors(sock)]
    assert b"-363" in codes  # input buffer overrun, once for the long line
    assert codes.count(b"-363") == 1
    assert all(c.startswith(b"-1") or c == b"-363" for c in codes), codes
    assert ask(sock, b"*IDN?").startswith(b"zbench,")
    sock.close()


def test_disconnect_mid_command_leaves_the_server_and_others_alone(sim_bench):
    other = raw_client(sim_bench, "analyzer")
    assert ask(other, b"SWE:POIN 401;POIN?") == b"401"
    for _ in range(5):
        quitter = raw_client(sim_bench, "analyzer")
        quitter.sendall(b"SENS:FREQ:STAR 12")  # no newline: the command never completes
        quitter.close()
        rude = raw_client(sim_bench, "analyzer")
        rude.sendall(b"*IDN?\n")
        rude.close()  # gone before its answer is read
    assert ask(other, b"FREQ:STAR?") != b"12.0"
    assert errors(other) == []
    fresh = raw_client(sim_bench, "analyzer")
    assert ask(fresh, b"*IDN?").startswith(b"zbench,")
    fresh.close()
    other.close()


def test_one_clients_errors_and_format_stay_its_own(sim_bench):
    a = raw_client(sim_bench, "analyzer")
    b = raw_client(sim_bench, "analyzer")
    a.sendall(b"NOT:A:COMMAND\n")
    ask(a, b"FORM ASC;FORM?")
    assert ask(b, b"FORM REAL,64;FORM?") == b"REAL,64"
    assert ask(a, b"FORM?") == b"ASC,0"
    assert errors(b) == []
    assert [e[:4] for e in errors(a)] == [b"-113"]
    a.close()
    b.close()


def test_several_clients_at_once_get_their_own_answers(sim_bench):
    """Eight threads on four instruments, each checking every answer it gets."""
    rm = pyvisa.ResourceManager("@py")
    failures: list[str] = []

    def worker(name: str, k: int) -> None:
        try:
            inst = rm.open_resource(
                sim_bench.resources[name],
                read_termination="\n",
                write_termination="\n",
                timeout=10000,
            )
            for i in range(25):
                if name == "analyzer":
                    inst.write("FORM REAL,64" if k % 2 else "FORM ASC")
                    inst.write("INIT")
                    assert inst.query("*OPC?") == "1"
                    if k % 2:
                        data = inst.query_binary_values(
                            "TRAC? S21", datatype="d", is_big_endian=True, container=np.array
                        )
                    else:
                        data = np.array([float(x) for x in inst.query("TRAC? S21").split(",")])
                    assert data.shape == (402,), data.shape
                elif name == "bench":
                    assert inst.query(f"OPER:PLAC? {k % 8 + 1}") in ("EMPT", "SHOR")
                    assert inst.query("OPER:POS?") == "8"
                elif name == "switch":
                    assert inst.query(f"ROUT:CLOS? (@{k % 8 + 1})") in ("0", "1")
                else:
                    assert inst.query("SOUR:VOLT?") == "0.0"
                assert inst.query("*IDN?").startswith("zbench,"), i
                assert inst.query("SYST:ERR?") == '0,"No error"'
            inst.close()
        except Exception as exc:  # collected and reported by the main thread
            failures.append(f"{name}#{k}: {exc!r}")

    threads = [
        threading.Thread(target=worker, args=(name, k))
        for k, name in enumerate(
            [
                "analyzer",
                "analyzer",
                "analyzer",
                "bench",
                "switch",
                "dc_source",
                "analyzer",
                "bench",
            ]
        )
    ]
    for t in threads:
        t.start()
    for t in threads:
        t.join(timeout=60)
    rm.close()
    assert failures == []


# --- faults ----------------------------------------------------------------------------


def inject(hands, command: str) -> None:
    """Send a FAULt command and wait until the bench has taken it (a write alone does
    not order it before another connection's next query)."""
    hands.write(command)
    assert hands.query("SYST:ERR?") == '0,"No error"'


def test_fault_delay_pushes_a_client_past_its_timeout(sim_bench, open_instrument):
    hands = open_instrument(sim_bench, "bench")
    vna = open_instrument(sim_bench, "analyzer", timeout_ms=300)
    inject(hands, "FAULt:DELay ANALyzer,0.8,1")
    assert "delay analyzer" in hands.query("FAULt:LIST?")
    with pytest.raises(pyvisa.errors.VisaIOError) as info:
        vna.query("*IDN?")
    assert info.value.error_code == pyvisa.constants.StatusCode.error_timeout
    # The late answer arrives afterwards; one fault, so the next answers are on time.
    vna.timeout = 3000
    assert vna.read().startswith("zbench,")
    assert vna.query("SWE:POIN?") == "201"


def test_fault_drop_closes_the_connection_after_n_queries(sim_bench, open_instrument):
    hands = open_instrument(sim_bench, "bench")
    inject(hands, "FAULt:DROP ANAL,2")
    sock = raw_client(sim_bench, "analyzer")
    assert ask(sock, b"*IDN?").startswith(b"zbench")
    assert ask(sock, b"SWE:POIN?") == b"201"
    sock.sendall(b"*IDN?\n")
    assert sock.recv(100) == b""  # closed without an answer
    sock.close()
    again = raw_client(sim_bench, "analyzer")  # the fault fired once: reconnecting works
    assert ask(again, b"*IDN?").startswith(b"zbench")
    again.close()


def test_fault_corrupt_block_header(sim_bench, open_instrument):
    hands = open_instrument(sim_bench, "bench")
    vna = open_instrument(sim_bench, "analyzer", timeout_ms=1000)
    vna.write("FORM REAL,64;:INIT")
    assert vna.query("*OPC?") == "1"
    inject(hands, "FAULt:BLOCk ANALyzer,1")
    with pytest.raises((ValueError, pyvisa.errors.VisaIOError)):
        vna.query_binary_values("TRAC? S21", datatype="d", container=np.array)
    vna.clear()
    fresh = open_instrument(sim_bench, "analyzer")
    fresh.write("FORM REAL,64")
    data = fresh.query_binary_values("TRAC? S21", datatype="d", container=np.array)
    assert data.shape == (402,)


def test_fault_error_reaches_open_sessions_and_the_next_one(sim_bench, open_instrument):
    hands = open_instrument(sim_bench, "bench")
    dc = open_instrument(sim_bench, "dc_source")
    inject(hands, 'FAULt:ERRor DCSource,-240,"overtemperature"')
    assert dc.query("SYST:ERR?") == '-240,"Hardware error;overtemperature"'
    assert dc.query("SYST:ERR?") == '0,"No error"'
    inject(hands, "FAULt:ERRor SWITch,-310")  # nobody connected to the switch yet
    sw = open_instrument(sim_bench, "switch")
    assert sw.query("SYST:ERR?").startswith("-310,")
    hands.write("SYST:ERR?")
    assert hands.read() == '0,"No error"'


def test_fault_missing_part_looks_empty_to_the_analyser(sim_bench, bench_client):
    client = bench_client(sim_bench)
    client.configure(1e4, 1e6, 51)
    client.do('OPER:PLAC 5,"MC22-6V3/s2"')
    client.select(5)
    _, present = client.sweep()
    client.do("FAULt:MISSing 5,ON")
    assert client.hands.query("OPER:PLAC? 5") == '"MC22-6V3/s2"'  # the operator believes it
    assert client.hands.query("FAULt:MISS? 5") == "1"
    _, missing = client.sweep()
    client.do("OPER:PLAC 5,EMPT")
    _, empty = client.sweep()
    # A 22 µF part pulls S21 far down; without it the path is nearly the through.
    assert np.max(np.abs(present[:, 1, 0])) < 0.1
    assert np.min(np.abs(missing[:, 1, 0])) > 0.5
    np.testing.assert_allclose(
        np.abs(missing[:, 1, 0]), np.abs(empty[:, 1, 0]), rtol=0.01
    )  # trace noise 0.01 dB
    client.do("FAULt:CLEar")
    assert client.hands.query("FAULt:LIST?") == '""'


def test_faults_from_the_scenario(sim_bench_factory, open_instrument):
    import yaml

    from simulated_instruments.scenario import SCENARIO_DIR

    data = yaml.safe_load((SCENARIO_DIR / "demo.yaml").read_text())
    data["faults"] = [
        {"type": "error", "instrument": "analyzer", "code": -240, "text": "lamp"},
        {"type": "missing", "position": 2},
    ]
    bench = sim_bench_factory(data)
    vna = open_instrument(bench, "analyzer")
    assert vna.query("SYST:ERR?") == '-240,"Hardware error;lamp"'
    hands = open_instrument(bench, "bench")
    assert hands.query("FAULt:MISSing? 2") == "1"


def test_new_message_interrupts_a_waiting_opc_query(sim_bench_factory):
    # 1601 points at 10 Hz IFBW: a 384 s sweep, 3.8 s at this time scale; the client
    # does not wait for *OPC? and sends another query (IEEE Std 488.2 §6.3.2.3, from memory: -410).
    bench = sim_bench_factory("demo", time_scale=0.01)
    sock = raw_client(bench, "analyzer")
    sock.sendall(b"SWE:POIN 1601;:BAND 10;:INIT;*OPC?\n")
    # The interrupted *OPC? gives no "1": the first answer is the *IDN? one.
    assert ask(sock, b"*IDN?").startswith(b"zbench,")
    sock.sendall(b"ABOR\n")
    assert [e[:4] for e in errors(sock)] == [b"-410"]
    sock.close()


def test_stopped_bench_closes_its_ports(sim_bench_factory):
    bench = sim_bench_factory("demo")
    sock = raw_client(bench, "switch")
    assert ask(sock, b"*IDN?").startswith(b"zbench,")
    bench.stop()
    assert sock.recv(10) == b""  # the open connection is closed
    sock.close()
    with pytest.raises(OSError):
        socket.create_connection(("127.0.0.1", bench.ports["switch"]), timeout=1).close()
    bench.stop()  # idempotent


def test_fuzz_random_bytes_over_the_socket(sim_bench):
    """Random bytes down a real connection: the server answers the next *IDN? on it and
    on a fresh connection, every time."""
    from hypothesis import given, settings
    from hypothesis import strategies as st

    watcher = raw_client(sim_bench, "analyzer")

    @settings(max_examples=60, deadline=None)
    @given(st.binary(max_size=300), st.booleans())
    def one_case(data: bytes, hang_up: bool) -> None:
        sock = raw_client(sim_bench, "analyzer")
        sock.sendall(data)
        if hang_up:
            sock.close()
        else:
            sock.sendall(b"\n*IDN?\n")
            lines = b""
            while b"zbench," not in lines:
                chunk = sock.recv(65536)
                assert chunk, "connection closed"
                lines += chunk
            sock.close()
        assert ask(watcher, b"*IDN?").startswith(b"zbench,")

    one_case()
    assert errors(watcher) == []
    watcher.close()


def test_stop_does_not_wait_for_a_long_sweep(sim_bench_factory):
    bench = sim_bench_factory("demo", time_scale=1.0)
    sock = raw_client(bench, "analyzer")
    # 20001 points at 1 Hz IFBW: hours of sweep; the client then waits on *OPC?.
    assert ask(sock, b"SWE:POIN 20001;:BAND 1;:INIT;:SWE:POIN?") == b"20001"
    sock.sendall(b"*OPC?\n")
    bench.stop()
    try:
        answer = sock.recv(10)
    except ConnectionResetError:  # closed with the *OPC? unread: a reset, not a FIN
        answer = b""
    assert answer == b""  # closed, and no "1" for a sweep that never finished
    sock.close()
    threads = [t for srv in bench._servers.values() for t in [srv.thread, *srv.threads]]
    assert threads and not any(t.is_alive() for t in threads)
