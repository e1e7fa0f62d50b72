"""Model families of equivalent circuits, by name.

``FAMILIES`` maps each family name of the registry (:mod:`bench.core.model_registry`,
the one list the schema, the API and ``auto`` read) to its
:class:`~bench.core.models.network.ModelFamily`, taken from the module the registry
names. To add a family, write a module with a ``FAMILY`` and add one registry line.
"""

from __future__ import annotations

from importlib import import_module

from bench.core.model_registry import MODEL_NAMES, REGISTRY
from bench.core.models.network import ModelFamily


def _load() -> dict[str, ModelFamily]:
    out: dict[str, ModelFamily] = {}
    for entry in REGISTRY:
        family = import_module(f"bench.core.models.{entry.module}").FAMILY
        if family.name != entry.name or family.kind != entry.kind:
            raise RuntimeError(
                f"model registry entry {entry.name} ({entry.kind}) does not match its module's "
                f"family {family.name} ({family.kind})"
            )
        out[entry.name] = family
    return out


FAMILIES: dict[str, ModelFamily] = _load()


def get_family(name: str) -> ModelFamily:
    """The family called ``name``; ``KeyError`` with the known names otherwise."""
    try:
        return FAMILIES[name]
    except KeyError:
        raise KeyError(f"unknown model {name!r}; choose one of {', '.join(MODEL_NAMES)}") from None


__all__ = ["FAMILIES", "MODEL_NAMES", "ModelFamily", "get_family"]
