"""Model families of equivalent circuits, by name.

``FAMILIES`` maps each name of the command line (``series-rlc``, ``two-branch``,
``ladder``, ``inductor``, ``bead``) to its :class:`~bench.core.models.network.ModelFamily`.
To add a family, write a module with a ``FAMILY`` and list it here.
"""

from __future__ import annotations

from bench.core.models import bead, inductor, ladder, series_rlc, two_branch
from bench.core.models.network import ModelFamily

FAMILIES: dict[str, ModelFamily] = {
    family.name: family
    for family in (
        series_rlc.FAMILY,
        two_branch.FAMILY,
        ladder.FAMILY,
        inductor.FAMILY,
        bead.FAMILY,
    )
}

MODEL_NAMES: tuple[str, ...] = (*FAMILIES, "auto")


def get_family(name: str) -> ModelFamily:
    """The family called ``name``; ``KeyError`` with the known names otherwise."""
    try:
        return FAMILIES[name]
    except KeyError:
        raise KeyError(f"unknown model {name!r}; choose one of {', '.join(MODEL_NAMES)}") from None


__all__ = ["FAMILIES", "MODEL_NAMES", "ModelFamily", "get_family"]
