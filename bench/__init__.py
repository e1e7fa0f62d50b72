"""zbench: shunt-through impedance measurement of power-delivery passives.

The numeric core lives in :mod:`bench.core` (no I/O); procedures, the run store,
exports, the report and the command line sit on top of it.
"""

__version__ = "0.1.0"
