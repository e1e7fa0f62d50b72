"""Every simulated instrument over a real socket with pyvisa-py."""

from __future__ import annotations

import socket

import numpy as np
import pytest

from simulated_instruments.scpi import ERROR_TEXTS


def drain_errors(inst) -> list[str]:
    errors = []
    for _ in range(30):
        answer = inst.query("SYSTem:ERRor:NEXT?")
        if answer.startswith("0,"):
            return errors
        errors.append(answer)
    raise AssertionError("error queue does not drain")


def test_resources_are_loopback_sockets(sim_bench):
    # the demo bench has a gain-phase analyser besides the four bench instruments
    assert set(sim_bench.resources) == {"analyzer", "switch", "dc_source", "bench", "gain_phase"}
    for name, resource in sim_bench.resources.items():
        assert resource == f"TCPIP0::127.0.0.1::{sim_bench.ports[name]}::SOCKET"
        assert sim_bench.ports[name] > 0


def test_every_instrument_answers_idn_and_starts_without_errors(sim_bench, open_instrument):
    for name in sim_bench.resources:
        inst = open_instrument(sim_bench, name)
        idn = inst.query("*IDN?")
        assert idn.count(",") == 3, idn
        assert inst.query("SYST:ERR?") == '0,"No error"'


def test_analyzer_settings_long_short_forms_and_queries(sim_bench, open_instrument):
    vna = open_instrument(sim_bench, "analyzer")
    vna.write("SENSe:FREQuency:STARt 1.5MHZ")
    assert float(vna.query("FREQ:STAR?")) == 1.5e6
    vna.write("freq:stop 200 mhz")
    assert float(vna.query(":SENS1:FREQ:STOP?")) == 200e6
    vna.write("SENS:SWE:POIN 1601;SPAC LOG")
    assert vna.query("SWE:POIN?") == "1601"
    assert vna.query("SENSe:SWEep:SPACing?") == "LOG"
    vna.write("BAND 100")
    assert float(vna.query("SENS:BAND:RES?")) == 100.0
    vna.write("SOUR:POW:LEV:IMM:AMPL -10")
    assert float(vna.query("SOURce:POWer?")) == -10.0
    vna.write("SENS:CORR:STAT OFF")
    assert vna.query("CORR?") == "0"
    assert drain_errors(vna) == []


@pytest.mark.parametrize(
    ("command", "code"),
    [
        ("SENS:FREQ:STAR 5", -222),  # below the 10 Hz minimum of the demo analyser
        ("SENS:FREQ:STOP 1GHZ", -222),
        ("SENS:SWE:POIN 20002", -222),
        ("SENS:SWE:POIN 1", -222),
        ("SOUR:POW 11", -222),
        ("SOUR:POW -31", -222),
        ("SENS:BAND 0.5", -222),
        ("SENS:BAND 200 KHZ", -222),
        ("SENS:SWE:SPAC CIRCULAR", -141),
        ("SENS:FREQ:STAR", -109),
        ("SENS:FREQ:STAR 1,2", -108),
        ("SENS:FREQ:STAR 1 V", -131),
        ("FREQ:STARTT 1", -113),
    ],
)
def test_analyzer_bounds_and_errors(sim_bench, open_instrument, command, code):
    vna = open_instrument(sim_bench, "analyzer")
    before = vna.query("FREQ:STAR?;STOP?;:SWE:POIN?;:SOUR:POW?;:BAND?")
    vna.write(command)
    errors = drain_errors(vna)
    assert len(errors) == 1 and errors[0].startswith(f'{code},"{ERROR_TEXTS[code]}'), errors
    assert vna.query("FREQ:STAR?;STOP?;:SWE:POIN?;:SOUR:POW?;:BAND?") == before


def test_sweep_ascii_and_binary_agree_in_both_byte_orders(sim_bench, open_instrument):
    vna = open_instrument(sim_bench, "analyzer")
    vna.write("FREQ:STAR 1e3;STOP 1e8;:SWE:POIN 201;SPAC LOG")
    vna.write("INIT:IMM")
    assert vna.query("*OPC?") == "1"
    vna.write("FORM ASC")
    ascii_f = np.array([float(x) for x in vna.query("FREQ:DATA?").split(",")])
    ascii_s21 = np.array([float(x) for x in vna.query("TRAC? S21").split(",")])
    # Definite-length block of 201 complex REAL,64 points: 3216 bytes, header #43216
    # (docs/references.md §7; IEEE Std 488.2 §8.7.9, clause from memory).
    vna.write("FORM REAL,64;BORD NORM")
    big = vna.query_binary_values(
        "TRAC:DATA? S21", datatype="d", is_big_endian=True, container=np.array
    )
    vna.write("FORM:BORD SWAP")
    little = vna.query_binary_values(
        "TRAC? S21", datatype="d", is_big_endian=False, container=np.array
    )
    f_block = vna.query_binary_values(
        "FREQ:DATA?", datatype="d", is_big_endian=False, container=np.array
    )
    np.testing.assert_array_equal(ascii_f, np.geomspace(1e3, 1e8, 201))
    np.testing.assert_array_equal(f_block, ascii_f)
    assert ascii_s21.shape == (402,)
    np.testing.assert_array_equal(big, ascii_s21)  # ASCII has full precision
    np.testing.assert_array_equal(little, ascii_s21)
    # The raw bytes, read off a plain socket (a VISA read would stop at a 0x0A byte
    # inside the block, docs/references.md §7).
    with socket.create_connection(("127.0.0.1", sim_bench.ports["analyzer"]), timeout=5) as sock:
        sock.sendall(b"FORM REAL,64;BORD NORM;:TRAC? S11\n")
        raw = b""
        while len(raw) < 6 + 3216 + 1:
            chunk = sock.recv(65536)
            assert chunk, "connection closed early"
            raw += chunk
    assert raw.startswith(b"#43216") and raw.endswith(b"\n") and len(raw) == 6 + 3216 + 1


def test_trace_before_any_sweep_is_data_stale(sim_bench, open_instrument):
    vna = open_instrument(sim_bench, "analyzer")
    vna.write("TRAC? S21")
    assert drain_errors(vna)[0].startswith("-230,")


def test_sweep_time_follows_points_and_bandwidth(sim_bench, open_instrument):
    vna = open_instrument(sim_bench, "analyzer")
    vna.write("SWE:POIN 201;:BAND 1000")
    t1 = float(vna.query("SWE:TIME?"))
    vna.write("SWE:POIN 1601")
    t2 = float(vna.query("SWE:TIME?"))
    vna.write("BAND 10")
    t3 = float(vna.query("SWE:TIME?"))
    assert t1 < t2 < t3
    # 1601 points at 10 Hz: at least 1601 × 1/10 s of IF settling in each direction.
    assert t3 > 1601 / 10


def test_switch_closes_one_position_at_a_time(sim_bench, open_instrument):
    sw = open_instrument(sim_bench, "switch")
    sw.write("ROUT:CLOS (@3)")
    assert sw.query("*OPC?") == "1"
    assert sw.query("ROUTe:CLOSe? (@3)") == "1"
    assert sw.query("ROUT:CLOS? (@1,2,3,4)") == "0,0,1,0"
    sw.write("ROUTe:CLOSe (@5)")
    assert sw.query("ROUT:CLOS? (@3,5)") == "0,1"
    assert sw.query("ROUT:CLOS:STAT?") == "(@5)"
    sw.write("ROUT:OPEN:ALL")
    assert sw.query("ROUT:CLOS? (@5)") == "0"
    assert sw.query("ROUT:CLOS:STAT?") == "(@)"
    sw.write("ROUT:CLOS (@9)")
    sw.write("ROUT:CLOS (@1,2)")
    errors = drain_errors(sw)
    assert [e[:4] for e in errors] == ["-222", "-221"]
    assert sim_bench.state.closed is None


def test_dc_source_limits_output_and_measurements(sim_bench, open_instrument):
    dc = open_instrument(sim_bench, "dc_source")
    dc.write("SOUR:VOLT 21")  # above the demo source's 20 V hard maximum
    dc.write("SOUR:CURR 0.2")  # above its 100 mA maximum
    assert [e[:4] for e in drain_errors(dc)] == ["-222", "-222"]
    assert float(dc.query("SOUR:VOLT?")) == 0.0
    dc.write("SOURce:VOLTage:LEVel:IMMediate:AMPLitude 3.3;:SOUR:CURR:LEV 50MA")
    assert float(dc.query("SOUR:VOLT:LEV:IMM:AMPL?")) == 3.3
    assert float(dc.query("SOUR:CURR?")) == pytest.approx(0.05)
    assert dc.query("OUTP?") == "0"
    assert abs(float(dc.query("MEAS:VOLT?"))) < 1e-3  # output off: 0 V
    dc.write("OUTP ON")
    assert dc.query("OUTPut:STATe?") == "1"
    # Nothing connected (no position closed): the terminals sit at the set point, no current.
    assert float(dc.query("MEASure:VOLTage?")) == pytest.approx(3.3, abs=1e-3)
    assert abs(float(dc.query("MEASure:CURRent?"))) < 1e-5
    dc.write("OUTP OFF")
    assert drain_errors(dc) == []


def test_bench_control_nodes(sim_bench, open_instrument):
    bench = open_instrument(sim_bench, "bench")
    bench.write("OPERator:CABLes STANdard,SHORt")
    assert bench.query("OPER:CABL?") == "STAN,SHOR"
    bench.write("OPER:CABL STAN,LOAD")
    assert bench.query("OPER:CABL?") == "STAN,LOAD"
    bench.write("OPER:CABL THR")
    assert bench.query("OPER:CABL?") == "THR"
    bench.write("OPER:CABL FIXT")
    assert bench.query("OPER:CABL?") == "FIXT"
    bench.write('OPERator:PLACe 2,"MC22-6V3/s1"')
    bench.write("OPER:PLAC 1,SHORt")
    bench.write("OPER:PLAC 3,EMPT")
    assert bench.query("OPER:PLAC? 2") == '"MC22-6V3/s1"'
    assert bench.query("OPER:PLAC? 1") == "SHOR"
    assert bench.query("OPER:PLAC? 3") == "EMPT"
    bench.write("OPER:TRAN ON")
    assert bench.query("OPER:TRAN?") == "1"
    bench.write("OPER:RES 499")
    assert float(bench.query("OPER:RES?")) == 499.0
    assert bench.query("OPER:POS?") == "8"
    parts = bench.query("OPER:PART?").strip('"').split(",")
    assert "PL530N/s2" in parts and "FB137/s1" in parts and len(parts) == 16
    bench.write('OPER:PLAC 2,"NOPART/s1"')
    bench.write("OPER:PLAC 9,SHORt")
    bench.write("OPER:CABL STAN,THRU")
    assert [e[:4] for e in drain_errors(bench)] == ["-224", "-222", "-141"]
    assert sim_bench.state.placements[2] == "MC22-6V3/s1"
