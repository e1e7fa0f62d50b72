"""MINPACK's ``lmder`` as scipy builds it, without importing ``scipy.optimize``.

Importing ``scipy.optimize`` (its linear programming, global optimisers, linear algebra
and array-API layers) is most of a ``zbench fit`` command's start-up (about 0.5 s of 1 s
on a 2-core machine), while a fit needs only scipy's compiled MINPACK driver. This module
loads that one extension from scipy's installed files. Where that does not work (another
layout or version of scipy) it imports the driver the usual way, and :data:`lmder` is None
when scipy has no such driver (the fitter then calls ``scipy.optimize.leastsq``). No I/O
beyond the import.
"""

from __future__ import annotations

import contextlib
import importlib.machinery
import importlib.util
import sys
from pathlib import Path
from types import ModuleType
from typing import Any

_NAME = "scipy.optimize._minpack"


def _extension() -> ModuleType | None:
    if _NAME in sys.modules:  # scipy.optimize is imported already: use its own
        return sys.modules[_NAME]
    try:
        spec = importlib.util.find_spec("scipy")
        folders = list(spec.submodule_search_locations or []) if spec else []
        for folder in folders:
            for suffix in importlib.machinery.EXTENSION_SUFFIXES:
                path = Path(folder) / "optimize" / f"_minpack{suffix}"
                if path.is_file():
                    loader = importlib.machinery.ExtensionFileLoader(_NAME, str(path))
                    found = importlib.util.spec_from_file_location(_NAME, path, loader=loader)
                    if found is None:
                        continue
                    module = importlib.util.module_from_spec(found)
                    loader.exec_module(module)
                    return module
    except Exception:  # any trouble loading it so: the usual import below
        sys.modules.pop(_NAME, None)
    try:
        from scipy.optimize import _minpack
    except ImportError:  # pragma: no cover - a scipy without it
        return None
    return _minpack


_module = _extension()
# The driver imports scipy's callback layer at its first call: loaded now, once, so that
# worker processes forked after this import do not each load it again (another scipy's
# first call imports whatever it needs).
with contextlib.suppress(ImportError):
    import scipy._lib._ccallback  # noqa: F401
#: scipy's compiled ``lmder`` driver (the one ``scipy.optimize.leastsq`` calls), or None.
lmder: Any = getattr(_module, "_lmder", None)
