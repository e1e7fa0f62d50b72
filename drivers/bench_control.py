"""Client of the simulated bench's control port: the hands of a scripted operator.

The simulated bench has no hands, so what an engineer does at the bench (put a
calibration standard on the cables, place a part in a mount, fit the isolation
transformer) is a SCPI command on its ``bench`` instrument. To the drivers it is just
another instrument on a socket. The nodes are those of the bench-control table in
DEVELOPERS.md; the fault-injection nodes (``FAULt:...``) are those documented in
``simulated_instruments/README.md``.
"""

from __future__ import annotations

import math

from drivers.command_map import format_number
from drivers.errors import PlanError
from drivers.scpi import ScpiInstrument

STANDARDS = {"short": "SHORt", "open": "OPEN", "load": "LOAD"}
# Instrument names of the fault nodes, by the resource keys of the simulated bench.
FAULT_TARGETS = {
    "analyzer": "ANALyzer",
    "switch": "SWITch",
    "dc_source": "DCSource",
    "bench": "BENCh",
}


class BenchControl(ScpiInstrument):
    """What the operator's hands do, as commands on the bench-control port."""

    # -- cables --------------------------------------------------------------------

    def connect_standard(self, standard: str) -> None:
        """Put a calibration standard (``"short"``, ``"open"`` or ``"load"``) on both cable ends."""
        key = standard.lower()
        if key not in STANDARDS:
            raise PlanError(
                f"unknown calibration standard {standard!r}; use one of {sorted(STANDARDS)}"
            )
        self.write_checked(f"OPERator:CABLes STANdard,{STANDARDS[key]}")

    def connect_through(self) -> None:
        """Join the two cable ends with the through adapter."""
        self.write_checked("OPERator:CABLes THRough")

    def connect_fixture(self) -> None:
        """Connect the cables to the fixture (the switch selects the position)."""
        self.write_checked("OPERator:CABLes FIXTure")

    def connect_mount(self, method: str) -> None:
        """Move the cables to the ``series-through`` or the ``reflection`` mount."""
        self.write_checked(f"OPERator:CABLes {_MOUNT_WORDS[_mount_key(method)]}")

    def connect_gain_phase(self) -> None:
        """Move the fixture to the gain-phase analyser: the network analyser's cables come
        off it (the switch still selects the position)."""
        self.write_checked("OPERator:CABLes GAINphase")

    def mount(self, method: str, item: str) -> None:
        """Fit ``item`` in the ``series-through`` or ``reflection`` mount: ``"empty"`` (the
        empty gap or open), ``"strap"`` (the zero-ohm strap) or ``"<part>/<sample>"``."""
        argument = _item_argument(item, {"empty": "GAP", "strap": "STRAp"})
        self.write_checked(f"OPERator:MOUNt {_MOUNT_WORDS[_mount_key(method)]},{argument}")

    def mounted(self, method: str) -> str:
        """What the ``series-through`` or ``reflection`` mount holds (quotes removed)."""
        word = _MOUNT_WORDS[_mount_key(method)]
        return self.transport.query(f"OPERator:MOUNt? {word}").strip().strip('"')

    def cables(self) -> str:
        """What the cables are connected to, as the bench reports it."""
        return self.transport.query("OPERator:CABLes?").strip()

    # -- fixture mounts --------------------------------------------------------------

    def place(self, position: int, item: str) -> None:
        """Fit ``item`` in the mount of ``position``.

        ``item`` is ``"short"`` (the shorting strap), ``"empty"`` (take out what is
        there) or ``"<part>/<sample>"`` (a part of the scenario and its sample name).
        """
        if isinstance(position, bool) or not isinstance(position, int) or position < 1:
            raise PlanError(f"fixture position must be an integer ≥ 1, got {position!r}")
        argument = _item_argument(item, {"short": "SHORt", "empty": "EMPTy"})
        self.write_checked(f"OPERator:PLACe {position},{argument}")

    def placed(self, position: int) -> str:
        """What is in the mount of ``position`` (quotes removed)."""
        return self.transport.query(f"OPERator:PLACe? {position}").strip().strip('"')

    # -- accessories -----------------------------------------------------------------

    def transformer(self, on: bool) -> None:
        """Fit (True) or remove (False) the common-mode isolation transformer on port 2."""
        self.write_checked(f"OPERator:TRANsformer {'ON' if on else 'OFF'}")

    def resistors(self, ohms: float) -> None:
        """Fit series resistors of ``ohms`` (Ω, ≥ 0; 0 removes them) at both ports."""
        if isinstance(ohms, bool) or not isinstance(ohms, int | float) or not math.isfinite(ohms):
            raise PlanError(f"series resistance must be a finite number of ohms, got {ohms!r}")
        if ohms < 0:
            raise PlanError(f"series resistance must be ≥ 0 Ω, got {ohms!r}")
        self.write_checked(f"OPERator:RESistors {format_number(ohms)}")

    def transformer_fitted(self) -> bool:
        """Whether the isolation transformer is fitted."""
        return self.transport.query("OPERator:TRANsformer?").strip() in ("1", "+1", "ON")

    def resistance(self) -> float:
        """Series resistance fitted at each port, Ω (0 without resistors)."""
        return self.query_float("OPERator:RESistors?")

    def positions(self) -> int:
        """Number of fixture positions."""
        return round(self.query_float("OPERator:POSitions?"))

    def parts(self) -> list[str]:
        """Every ``<part>/<sample>`` the bench has to place."""
        answer = self.transport.query("OPERator:PARTs?").strip().strip('"')
        return [item for item in answer.split(",") if item]

    # -- fault injection (simulated bench only) ------------------------------------------

    def fault_delay(self, instrument: str, seconds: float, count: int = 1) -> None:
        """Delay the next ``count`` answers of ``instrument`` by ``seconds`` of real time
        (``count`` 0: every answer until :meth:`clear_faults`)."""
        target = _fault_target(instrument)
        self.write_checked(f"FAULt:DELay {target},{format_number(seconds)},{int(count)}")

    def fault_drop(self, instrument: str, after: int = 0) -> None:
        """Close the connection of ``instrument`` instead of answering, after ``after``
        more answered queries (once)."""
        self.write_checked(f"FAULt:DROP {_fault_target(instrument)},{int(after)}")

    def fault_corrupt_block(self, instrument: str = "analyzer", count: int = 1) -> None:
        """Break the length digits of the next ``count`` binary blocks."""
        self.write_checked(f"FAULt:BLOCk {_fault_target(instrument)},{int(count)}")

    def fault_error(self, instrument: str, code: int, text: str | None = None) -> None:
        """Push an entry into the error queue of ``instrument``'s sessions."""
        argument = f"{_fault_target(instrument)},{int(code)}"
        if text is not None:
            if '"' in text:
                raise PlanError(f"fault error text must not contain quotes, got {text!r}")
            argument += f',"{text}"'
        self.write_checked(f"FAULt:ERRor {argument}")

    def fault_missing(self, position: int, missing: bool = True) -> None:
        """Make the part in ``position`` not really be there (the mount reads empty)."""
        self.write_checked(f"FAULt:MISSing {int(position)},{'ON' if missing else 'OFF'}")

    def clear_faults(self) -> None:
        """Clear every injected fault."""
        self.write_checked("FAULt:CLEar")

    def faults(self) -> str:
        """A one-line description of the active faults."""
        return self.transport.query("FAULt:LIST?").strip().strip('"')


_MOUNT_WORDS = {"series-through": "SERies", "reflection": "REFLection"}


def _item_argument(item: str, words: dict[str, str]) -> str:
    """The SCPI argument for what goes in a mount: one of ``words`` (by its key) or a
    quoted ``"<part>/<sample>"``."""
    key = item.strip().lower()
    if key in words:
        return words[key]
    if '"' in item or item.count("/") != 1 or item.startswith("/") or item.endswith("/"):
        names = "', '".join(words)
        raise PlanError(
            f"item {item!r} must be '{names}' or '<part>/<sample>' (one slash, no quotes)"
        )
    return f'"{item}"'


def _mount_key(method: str) -> str:
    key = method.strip().lower()
    if key not in _MOUNT_WORDS:
        raise PlanError(f"mount must be 'series-through' or 'reflection', got {method!r}")
    return key


def _fault_target(instrument: str) -> str:
    try:
        return FAULT_TARGETS[instrument.lower()]
    except KeyError:
        raise PlanError(
            f"unknown instrument {instrument!r} for a fault; use one of {sorted(FAULT_TARGETS)}"
        ) from None
