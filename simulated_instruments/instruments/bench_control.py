"""The bench-control port: the hands of a scripted operator, and fault injection.

Nodes (DEVELOPERS.md, bench-control table; FAULt nodes in the simulator's README):

- ``OPERator:CABLes STANdard,SHORt|OPEN|LOAD``, ``THRough``, ``FIXTure``, ``SERies``
  (both cables on the series-through mount), ``REFLection`` (the port-1 cable on the
  reflection mount, the port-2 cable left open), ``GAINphase`` (the network analyser's
  cables off the fixture, left open, and the gain-phase analyser on it);
  ``OPERator:CABLes?`` answers ``STAN,SHOR``, ``STAN,OPEN``, ``STAN,LOAD``, ``THR``,
  ``FIXT``, ``SER``, ``REFL`` or ``GAIN``;
- ``OPERator:MOUNt SERies|REFLection,GAP|STRAp|"<part>/<sample>"``: leave the mount empty
  (the series mount's empty gap, the reflection mount's open; ``EMPTy`` and ``OPEN`` are
  read too), fit its zero-ohm strap (``SHORt`` read too), or mount a part;
  ``OPERator:MOUNt? SERies|REFLection`` answers ``GAP``, ``STRA`` or the quoted part;
- ``OPERator:PLACe <pos>,SHORt|EMPTy|"<part>/<sample>"``; ``OPERator:PLACe? <pos>``
  answers ``SHOR``, ``EMPT`` or the quoted part;
- ``OPERator:TRANsformer ON|OFF`` (query 1/0), ``OPERator:RESistors <ohms>`` (query);
- ``OPERator:POSitions?`` (number of positions), ``OPERator:PARTs?`` (quoted,
  comma-separated ``part/sample`` names);
- ``FAULt:DELay``, ``FAULt:DROP``, ``FAULt:BLOCk``, ``FAULt:ERRor``, ``FAULt:MISSing``,
  ``FAULt:CLEar``, ``FAULt:LIST?``.
"""

from __future__ import annotations

from simulated_instruments.instruments.nodes import Nodes, none, one
from simulated_instruments.scpi import (
    CommandTree,
    Instrument,
    ScpiError,
    Session,
    format_number,
    parse_boolean,
    parse_choice,
    parse_integer,
    parse_numeric,
    parse_string,
)
from simulated_instruments.state import EMPTY, SHORT, BenchState

_INSTRUMENT_WORDS = {
    "ANALYZER": "analyzer",
    "SWITCH": "switch",
    "DCSOURCE": "dc_source",
    "BENCH": "bench",
}
_CABLE_ANSWERS = {
    "SHORT": "STAN,SHOR",
    "OPEN": "STAN,OPEN",
    "LOAD": "STAN,LOAD",
    "THROUGH": "THR",
    "FIXTURE": "FIXT",
    "SERIES": "SER",
    "REFLECTION": "REFL",
    "GAINPHASE": "GAIN",
}


def parse_instrument(text: str) -> str:
    """``ANALyzer``, ``SWITch``, ``DCSource`` or ``BENCh`` (``dc_source`` also read)."""
    word = text.strip().strip("\"'").upper().replace("_", "")
    if word in ("DCSOURCE", "DCS", "DCSOUR"):
        return "dc_source"
    long = parse_choice(word, ("ANALyzer", "SWITch", "DCSource", "BENCh"), name="instrument")
    return _INSTRUMENT_WORDS[long]


def _item_answer(item: str, short: str, empty: str) -> str:
    """What a mount holds, as a query answers it: ``short``, ``empty`` or the quoted part."""
    if item == SHORT:
        return short
    if item == EMPTY:
        return empty
    return f'"{item}"'


class BenchControl(Instrument):
    name = "bench"

    def __init__(self, state: BenchState):
        self.state = state
        super().__init__()

    def identity(self) -> str:
        return self.state.scenario.bench_identity

    def reset(self) -> None:
        """``*RST`` leaves the bench as it is: hands do not undo themselves."""

    def position(self, text: str) -> int:
        n = self.state.scenario.positions
        return parse_integer(text, minimum=1, maximum=n, name="position")

    def part(self, name: str) -> str:
        """``name`` if it is a ``part/sample`` of the scenario, else ``-224``."""
        st = self.state
        if name not in st.scenario.parts:
            raise ScpiError(
                -224, f"no part {name[:40]!r} in scenario {st.scenario.name}; see OPERator:PARTs?"
            )
        return name

    def build(self, tree: CommandTree) -> None:
        st = self.state

        def set_cables(s: Session, p: list[str]) -> None:
            if not p:
                raise ScpiError(-109, "cables")
            what = parse_choice(
                p[0],
                ("STANdard", "THRough", "FIXTure", "SERies", "REFLection", "GAINphase"),
                name="cables",
            )
            if what == "STANDARD":
                if len(p) != 2:
                    raise ScpiError(-109 if len(p) < 2 else -108, "STANdard,SHORt|OPEN|LOAD")
                st.set_cables(parse_choice(p[1], ("SHORt", "OPEN", "LOAD"), name="standard"))
            else:
                if len(p) > 1:
                    raise ScpiError(-108, p[1][:40])
                st.set_cables(what)

        tree.add(
            "OPERator:CABLes",
            set=set_cables,
            query=lambda s, p: (none(p), _CABLE_ANSWERS[st.cables])[1],
        )

        def place(s: Session, p: list[str]) -> None:
            if len(p) != 2:
                raise ScpiError(-109 if len(p) < 2 else -108, "PLACe <pos>,<item>")
            pos = self.position(p[0])
            text = p[1].strip()
            if text[:1] in "\"'":
                item = parse_string(text, name="part")
            else:
                word = text.upper()
                if word in ("SHOR", "SHORT"):
                    item = SHORT
                elif word in ("EMPT", "EMPTY"):
                    item = EMPTY
                else:
                    item = text
            st.place(pos, item if item in (SHORT, EMPTY) else self.part(item))

        def placed(s: Session, p: list[str]) -> str:
            item = st.placements[self.position(one(p, "position"))]
            return _item_answer(item, "SHOR", "EMPT")

        tree.add("OPERator:PLACe", set=place, query=placed)

        def which_mount(text: str) -> str:
            return parse_choice(text, ("SERies", "REFLection"), name="mount")

        def mount(s: Session, p: list[str]) -> None:
            if len(p) != 2:
                raise ScpiError(-109 if len(p) < 2 else -108, "MOUNt SERies|REFLection,<item>")
            which = which_mount(p[0])
            text = p[1].strip()
            if text[:1] in "\"'":
                item = self.part(parse_string(text, name="part"))
            else:
                word = parse_choice(text, ("GAP", "STRAp", "EMPTy", "OPEN", "SHORt"), name="item")
                item = SHORT if word in ("STRAP", "SHORT") else EMPTY
            st.mount(which, item)

        def mounted(s: Session, p: list[str]) -> str:
            return _item_answer(st.mounted[which_mount(one(p, "mount"))], "STRA", "GAP")

        tree.add("OPERator:MOUNt", set=mount, query=mounted)

        nodes = Nodes(tree, st)
        nodes.boolean("OPERator:TRANsformer", "transformer", name="transformer")

        def set_resistors(s: Session, p: list[str]) -> None:
            value = parse_numeric(
                one(p, "resistance"),
                "OHM",
                minimum=0.0,
                maximum=st.scenario.max_series_resistance,
                default=0.0,
                name="resistance",
            )
            with st.lock:
                st.resistors = value

        tree.add(
            "OPERator:RESistors",
            set=set_resistors,
            query=lambda s, p: (none(p), format_number(st.resistors))[1],
        )
        nodes.query("OPERator:POSitions", lambda: str(st.scenario.positions))
        nodes.query("OPERator:PARTs", lambda: '"' + ",".join(st.scenario.parts) + '"')

        # --- faults ----------------------------------------------------------------------
        faults = st.faults

        def fault_delay(s: Session, p: list[str]) -> None:
            if len(p) not in (2, 3):
                raise ScpiError(-109 if len(p) < 2 else -108, "DELay <instr>,<s>[,<count>]")
            inst = parse_instrument(p[0])
            seconds = parse_numeric(p[1], "S", minimum=0.0, maximum=3600.0, name="delay")
            count = (
                parse_integer(p[2], minimum=0, maximum=10**6, name="count") if len(p) == 3 else 1
            )
            faults.set_delay(inst, seconds, count)

        def fault_drop(s: Session, p: list[str]) -> None:
            if len(p) != 2:
                raise ScpiError(-109 if len(p) < 2 else -108, "DROP <instr>,<queries>")
            faults.set_drop(
                parse_instrument(p[0]), parse_integer(p[1], minimum=0, maximum=10**6, name="after")
            )

        def fault_block(s: Session, p: list[str]) -> None:
            if len(p) not in (1, 2):
                raise ScpiError(-109 if not p else -108, "BLOCk <instr>[,<count>]")
            count = (
                parse_integer(p[1], minimum=0, maximum=10**6, name="count") if len(p) == 2 else 1
            )
            faults.set_corrupt_blocks(parse_instrument(p[0]), count)

        def fault_error(s: Session, p: list[str]) -> None:
            if len(p) not in (2, 3):
                raise ScpiError(-109 if len(p) < 2 else -108, 'ERRor <instr>,<code>[,"<text>"]')
            inst = parse_instrument(p[0])
            code = parse_integer(p[1], minimum=-999, maximum=32767, name="code")
            text = parse_string(p[2], name="text") if len(p) == 3 else "injected fault"
            st.push_error(inst, code, text)

        def fault_missing(s: Session, p: list[str]) -> None:
            if len(p) not in (1, 2):
                raise ScpiError(-109 if not p else -108, "MISSing <pos>[,ON|OFF]")
            missing = parse_boolean(p[1], name="missing") if len(p) == 2 else True
            st.set_missing(self.position(p[0]), missing)

        def fault_missing_query(s: Session, p: list[str]) -> str:
            return "1" if faults.is_missing(self.position(one(p, "position"))) else "0"

        def fault_clear(s: Session, p: list[str]) -> None:
            none(p)
            faults.clear()
            st.refresh_load()

        tree.add("FAULt:DELay", set=fault_delay)
        tree.add("FAULt:DROP", set=fault_drop)
        tree.add("FAULt:BLOCk", set=fault_block)
        tree.add("FAULt:ERRor", set=fault_error)
        tree.add("FAULt:MISSing", set=fault_missing, query=fault_missing_query)
        tree.add("FAULt:CLEar", set=fault_clear)
        nodes.query("FAULt:LIST", lambda: '"' + faults.describe() + '"')
