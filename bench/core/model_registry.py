"""The one registry of model families: names, kinds and what ``auto`` tries.

Pure data (no numpy), so the procedure schema, the command line and the notebook API
can read the family names without importing the numeric core. The families themselves
(circuits, start values) live in ``bench/core/models/<module>.py``;
``bench.core.models`` builds ``FAMILIES`` from this list, and ``auto`` in
``bench.core.fitting`` tries, for the data's kind, each family's ``auto_orders`` in the
order listed here. To add a family: write its module and add one line below.
"""

from __future__ import annotations

from dataclasses import dataclass


@dataclass(frozen=True)
class FamilyEntry:
    """One model family: its command-line ``name``, the ``kind`` of part it describes
    (``"capacitor"`` or ``"inductor"``), the module under ``bench.core.models`` that holds
    its ``FAMILY``, and the orders ``auto`` tries (empty: ``auto`` never tries it)."""

    name: str
    kind: str
    module: str
    auto_orders: tuple[int, ...]


REGISTRY: tuple[FamilyEntry, ...] = (
    FamilyEntry("series-rlc", "capacitor", "series_rlc", (1,)),
    FamilyEntry("lossy-rlc", "capacitor", "lossy_rlc", (0, 1, 2)),
    FamilyEntry("two-branch", "capacitor", "two_branch", (1,)),
    FamilyEntry("ladder", "capacitor", "ladder", (2, 3, 4, 5)),
    FamilyEntry("inductor", "inductor", "inductor", (0, 1, 2, 3, 4)),
    FamilyEntry("bead", "inductor", "bead", (1, 2, 3)),
)

#: Family names in registry order.
FAMILY_NAMES: tuple[str, ...] = tuple(e.name for e in REGISTRY)
#: Every name ``--model`` accepts: the families and ``auto``.
MODEL_NAMES: tuple[str, ...] = (*FAMILY_NAMES, "auto")
#: Kind of part each family describes.
MODEL_KINDS: dict[str, str] = {e.name: e.kind for e in REGISTRY}


def auto_candidates(kind: str) -> tuple[tuple[str, tuple[int, ...]], ...]:
    """``(name, orders)`` that ``auto`` tries for data of ``kind``, in registry order."""
    return tuple((e.name, e.auto_orders) for e in REGISTRY if e.kind == kind and e.auto_orders)
