"""The SCPI parser and helpers, without sockets; property-based fuzzing with hypothesis."""

from __future__ import annotations

import struct

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from simulated_instruments.scpi import (
    ERROR_QUEUE_SIZE,
    CommandTree,
    Instrument,
    ScpiError,
    Session,
    error_string,
    format_block,
    mnemonic_forms,
    parse_block,
    parse_boolean,
    parse_channel_list,
    parse_choice,
    parse_header,
    parse_numeric,
    parse_string,
    split_message_units,
    split_parameters,
)


class Toy(Instrument):
    """A small instrument with optional nodes, for the parser's behaviour."""

    name = "toy"

    def __init__(self) -> None:
        self.values: dict[str, float] = {}
        super().__init__()

    def identity(self) -> str:
        return "zbench,toy,0,1"

    def build(self, tree: CommandTree) -> None:
        for pattern, key in (
            ("[SENSe:]FREQuency:STARt", "start"),
            ("[SENSe:]FREQuency:STOP", "stop"),
            ("SOURce:POWer[:LEVel][:IMMediate][:AMPLitude]", "power"),
            ("[SENSe:]SWEep:POINts", "points"),
        ):

            def set_(s, p, key=key):
                if len(p) != 1:
                    raise ScpiError(-109 if not p else -108, key)
                self.values[key] = parse_numeric(p[0], "HZ" if key != "power" else "DBM")

            def query(s, p, key=key):
                return repr(self.values.get(key, 0.0))

            tree.add(pattern, set=set_, query=query)


def run(inst: Instrument, line: str, session: Session | None = None):
    session = session or Session()
    return inst.execute(session, line), session


def test_mnemonic_forms():
    assert mnemonic_forms("FREQuency") == ("FREQ", "FREQUENCY")
    assert mnemonic_forms("STARt") == ("STAR", "START")
    assert mnemonic_forms("POINts") == ("POIN", "POINTS")


@pytest.mark.parametrize(
    "line",
    [
        "SENSe:FREQuency:STARt 1000",
        "SENS:FREQ:STAR 1000",
        "sens:freq:star 1000",
        "FREQ:STAR 1000",
        ":FREQuency:STARt 1KHZ",
        "SENS1:FREQ:STAR 1e3",
        "sEnSe:FrEq:StArT 1.0E+03",
    ],
)
def test_long_short_optional_and_case_insensitive(line):
    toy = Toy()
    responses, session = run(toy, line)
    assert responses == [] and not session.errors
    assert toy.values["start"] == 1000.0


def test_semicolon_keeps_the_path_and_colon_resets_it():
    toy = Toy()
    responses, session = run(toy, "SENS:FREQ:STAR 10;STOP 20;:SOUR:POW -5;:SWE:POIN 11")
    assert not session.errors, list(session.errors)
    assert toy.values == {"start": 10.0, "stop": 20.0, "power": -5.0, "points": 11.0}
    responses, _ = run(toy, "FREQ:STAR?;STOP?;*IDN?;STAR?")
    # A common command does not change the path (IEEE Std 488.2 §7.6.1.2 / SCPI-99 §6.2.5,
    # clause numbers from memory; docs/references.md §7).
    assert responses == ["10.0", "20.0", "zbench,toy,0,1", "10.0"]


def test_optional_nodes_in_the_middle():
    toy = Toy()
    for line in (
        "SOUR:POW 3",
        "SOUR:POW:LEV 3",
        "SOUR:POW:IMM:AMPL 3",
        "SOURce:POWer:LEVel:IMMediate 3",
    ):
        _, session = run(toy, line)
        assert not session.errors, (line, list(session.errors))
    _, session = run(toy, "SOUR:LEV 3")
    assert session.errors[0][0] == -113


@pytest.mark.parametrize(
    ("text", "unit", "value"),
    [
        # IEEE Std 488.2 §7.7.3 suffix multipliers (clause from memory; docs/references.md §7):
        # M is milli, MA mega, but MHZ is mega.
        ("1.5MHZ", "HZ", 1.5e6),
        ("1.5 MHz", "HZ", 1.5e6),
        ("10KHZ", "HZ", 1e4),
        ("2GHZ", "HZ", 2e9),
        ("5M", "HZ", 5e-3),
        ("5MA", "HZ", 5e6),
        ("50MA", "A", 50e-3),  # with the unit A: milliampere
        ("200MV", "V", 0.2),
        ("3UA", "A", 3e-6),
        ("1MS", "S", 1e-3),
        ("-10DBM", "DBM", -10.0),
        ("499OHM", "OHM", 499.0),
        ("1MOHM", "OHM", 1e6),
        ("2.2K", "OHM", 2.2e3),
        (".5", None, 0.5),
        ("+1E-3", None, 1e-3),
    ],
)
def test_numeric_suffixes(text, unit, value):
    assert parse_numeric(text, unit) == pytest.approx(value, rel=1e-12)


@pytest.mark.parametrize(
    ("text", "unit", "code"),
    [
        ("1 V", "HZ", -131),
        ("1 XYZ", "HZ", -131),
        ("abc", "HZ", -120),
        ('"1"', "HZ", -104),
        ("1 HZ", None, -138),
        ("1e999", None, -222),
    ],
)
def test_numeric_errors(text, unit, code):
    with pytest.raises(ScpiError) as info:
        parse_numeric(text, unit)
    assert info.value.code == code


def test_numeric_bounds_and_specials():
    assert parse_numeric("MAX", minimum=1, maximum=5) == 5
    assert parse_numeric("min", minimum=1, maximum=5) == 1
    assert parse_numeric("DEF", minimum=1, maximum=5, default=2) == 2
    with pytest.raises(ScpiError) as info:
        parse_numeric("6", minimum=1, maximum=5)
    assert info.value.code == -222


def test_negative_bounds_are_inclusive():
    # A source power limit of -30 dBm accepts -30 dBm itself, and refuses just below it.
    assert parse_numeric("-30", "DBM", minimum=-30, maximum=10) == -30
    assert parse_numeric("-10", "DBM", minimum=-40, maximum=-10) == -10
    with pytest.raises(ScpiError) as info:
        parse_numeric("-30.001", "DBM", minimum=-30, maximum=10)
    assert info.value.code == -222


def test_other_parameter_readers():
    assert parse_boolean("ON") and parse_boolean("1") and not parse_boolean("off")
    assert parse_choice("log", ("LINear", "LOGarithmic")) == "LOGARITHMIC"
    assert parse_string('"MC22-6V3/s1"') == "MC22-6V3/s1"
    assert parse_string("'it''s'") == "it's"
    assert parse_channel_list("(@3)") == [3]
    assert parse_channel_list("(@1,3:5)") == [1, 3, 4, 5]
    assert split_parameters("STAN, SHOR") == ["STAN", "SHOR"]
    assert split_parameters('2,"a,b"') == ["2", '"a,b"']
    assert split_parameters("(@1,2)") == ["(@1,2)"]
    assert split_message_units('A "x;y";B') == ['A "x;y"', "B"]
    for bad, code in (("1,,2", -103), ("(@1", -103)):
        with pytest.raises(ScpiError) as info:
            split_parameters(bad)
        assert info.value.code == code


def test_headers():
    h = parse_header(":SENS1:FREQ:STAR?")
    assert h.rooted and h.query and h.nodes == (("SENS", 1), ("FREQ", None), ("STAR", None))
    assert parse_header("*idn?").common
    for bad, code in (("FREQ::STAR", -102), ("FR\x01EQ", -101), ("A" * 13, -112)):
        with pytest.raises(ScpiError) as info:
            parse_header(bad)
        assert info.value.code == code


def test_header_suffix_out_of_range_and_undefined():
    toy = Toy()
    _, session = run(toy, "SENS2:FREQ:STAR 1")
    _, session = run(toy, "NOSUCH:NODE 1", session)
    assert [code for code, _ in session.errors] == [-114, -113]


def test_blocks_ieee_488_2():
    # 201 complex REAL,64 points -> 3216 bytes -> header #43216 (docs/references.md §7).
    payload = struct.pack(">402d", *range(402))
    block = format_block(payload)
    assert block.startswith(b"#43216")
    assert parse_block(block + b"\n") == (payload, len(block))
    assert format_block(b"") == b"#10"


def test_error_queue_overflow_and_status():
    session = Session()
    for _ in range(ERROR_QUEUE_SIZE + 5):
        session.push_error(-113, "x")
    assert len(session.errors) == ERROR_QUEUE_SIZE
    assert session.errors[-1][0] == -350  # SCPI-99, docs/references.md §7: last entry = overflow
    assert session.status_byte() & 0x04
    assert session.esr & 0x20  # command error bit (IEEE Std 488.2 §11.5.1, from memory)
    assert error_string(-222, 'too "big"') == "-222,\"Data out of range;too 'big'\""


def test_common_commands_and_status():
    toy = Toy()
    session = Session()
    toy.execute(session, "BAD")
    assert toy.execute(session, "*ESR?") == ["32"]
    assert toy.execute(session, "*ESR?") == ["0"]  # reading clears it
    assert toy.execute(session, "*STB?") == ["4"]  # the queue still holds the error
    toy.execute(session, "*CLS")
    assert toy.execute(session, "*STB?;SYST:ERR?") == ["0", '0,"No error"']
    toy.execute(session, "*ESE 32;*SRE 32")
    assert toy.execute(session, "*ESE?;*SRE?;*OPC?;*TST?") == ["32", "32", "1", "0"]


# --- fuzzing ---------------------------------------------------------------------------


def assert_protocol_errors_only(session: Session) -> None:
    """Only standard command/execution/query errors, never an internal failure."""
    for code, detail in session.errors:
        assert code == -350 or -499 <= code <= -100, (code, detail)
        assert not detail.startswith("internal"), detail


_scpi_alphabet = st.sampled_from(list("SENSFREQSTARTOPabcxyz0123456789:;*?,. \t\"'()@#-+eE"))


@settings(max_examples=400, deadline=None)
@given(st.text(_scpi_alphabet, max_size=60))
def test_fuzz_scpi_like_text_never_escapes_the_error_queue(line):
    toy = Toy()
    session = Session()
    responses = toy.execute(session, line)
    assert isinstance(responses, list)
    assert_protocol_errors_only(session)
    # The session still works afterwards.
    session.errors.clear()
    assert toy.execute(session, "*IDN?") == ["zbench,toy,0,1"]


@settings(max_examples=300, deadline=None)
@given(st.binary(max_size=80))
def test_fuzz_binary_noise(data):
    toy = Toy()
    session = Session()
    toy.execute(session, data.decode("latin-1"))
    assert_protocol_errors_only(session)
    session.errors.clear()
    assert toy.execute(session, "*IDN?") == ["zbench,toy,0,1"]


@settings(max_examples=200, deadline=None)
@given(
    st.floats(min_value=-1e12, max_value=1e12, allow_nan=False),
    st.sampled_from(["", "K", "M", "U", "N", "MA", "G"]),
)
def test_fuzz_numeric_values_round_trip(value, prefix):
    multiplier = {"": 1, "K": 1e3, "M": 1e-3, "U": 1e-6, "N": 1e-9, "MA": 1e6, "G": 1e9}[prefix]
    parsed = parse_numeric(f"{value!r}{prefix}", None)
    assert parsed == pytest.approx(value * multiplier, rel=1e-12, abs=1e-300)


_HEADERS = [
    "SENS:FREQ:STAR",
    "FREQ:STOP",
    "SWE:POIN",
    "SWE:SPAC",
    "BAND",
    "SOUR:POW",
    "CORR",
    "INIT",
    "FORM",
    "FORM:BORD",
    "FREQ:DATA?",
    "TRAC?",
    "SWE:TIME?",
    "*OPC?",
    "SYST:ERR?",
    "ROUT:CLOS",
    "ROUT:CLOS?",
    "ROUT:OPEN:ALL",
    "SOUR:VOLT",
    "SOUR:CURR",
    "OUTP",
    "MEAS:VOLT?",
    "MEAS:CURR?",
    "OPER:CABL",
    "OPER:PLAC",
    "OPER:PLAC?",
    "OPER:TRAN",
    "OPER:RES",
    "FAUL:MISS",
    "FAUL:BLOC",
    "FAUL:LIST?",
]
_PARAMS = st.one_of(
    st.sampled_from(
        [
            "",
            "1",
            "0",
            "-1",
            "1e9",
            "1e-9",
            "ON",
            "OFF",
            "LOG",
            "REAL,64",
            "ASC",
            "SWAP",
            "(@1)",
            "(@9)",
            "(@1,2)",
            "STAN,SHOR",
            "THR",
            "FIXT",
            '1,"MC22-6V3/s1"',
            "2,SHOR",
            "S21",
            "S33",
            "MAX",
            "MIN",
            "1.5MHZ",
            "20MA",
            "21",
            "499",
            '"x',
            "analyzer,1",
        ]
    ),
    st.text(_scpi_alphabet, max_size=12),
)


@settings(max_examples=150, deadline=None)
@given(st.lists(st.tuples(st.sampled_from(_HEADERS), _PARAMS), min_size=1, max_size=6))
def test_fuzz_the_real_instruments(units):
    """Random programs of real headers and odd parameters on every simulated instrument:
    only standard errors, and each instrument still answers afterwards."""
    from simulated_instruments.instruments import Analyzer, BenchControl, DcSource, Switch
    from simulated_instruments.scenario import load_scenario
    from simulated_instruments.state import BenchState

    state = BenchState(_demo_scenario(load_scenario), time_scale=1e-6)
    line = ";:".join(f"{h} {p}".strip() for h, p in units)
    for cls in (Analyzer, Switch, DcSource, BenchControl):
        inst = cls(state)
        session = Session()
        inst.execute(session, line)
        assert_protocol_errors_only(session)
        session.errors.clear()
        assert inst.execute(session, "*IDN?;SYST:ERR?")[1] == '0,"No error"'


_SCENARIO_CACHE: list = []


def _demo_scenario(load):
    if not _SCENARIO_CACHE:
        _SCENARIO_CACHE.append(load("demo", seed=1))
    return _SCENARIO_CACHE[0]
