"""Client of the simulated bench's control port: the hands of a scripted operator.

The simulated bench has no hands, so what an engineer does at the bench (put a
calibration standard on the cables, place a part in a mount, fit the isolation
transformer) is a SCPI command on its ``bench`` instrument. To the drivers it is just
another instrument on a socket. The nodes are those of the bench-control table in
DEVELOPERS.md; fault injection (``FAULt:...``) is documented with the simulator.
"""

from __future__ import annotations

import math

from drivers.command_map import format_number
from drivers.errors import PlanError
from drivers.scpi import ScpiInstrument

STANDARDS = {"short": "SHORt", "open": "OPEN", "load": "LOAD"}


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
        key = item.strip().lower()
        if key == "short":
            argument = "SHORt"
        elif key == "empty":
            argument = "EMPTy"
        else:
            if '"' in item or item.count("/") != 1 or item.startswith("/") or item.endswith("/"):
                raise PlanError(
                    f"item {item!r} must be 'short', 'empty' or '<part>/<sample>' "
                    "(one slash, no quotes)"
                )
            argument = f'"{item}"'
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
