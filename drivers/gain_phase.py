"""A gain-phase analyser driven by a command map of kind ``gain_phase``.

It sweeps like a network analyser (the same map keys: start, stop, points, spacing,
bandwidth, source level, sync, data format) but reads one quantity, the ratio of its two
receivers B/A (``RATIO``). Turning that ratio into an impedance needs the set-up (the
reference resistor, receiver B's input impedance): ``bench.core.conversions.gain_phase_z``.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from drivers.analyzer import NetworkAnalyzer
from drivers.command_map import CommandMap
from drivers.transport import Transport


class GainPhaseAnalyzer(NetworkAnalyzer):
    """A gain-phase analyser speaking the dialect of ``command_map`` (``gain_phase.yaml``)."""

    kind = "gain_phase"

    def __init__(self, transport: Transport, command_map: CommandMap | str | Path = "gain_phase"):
        super().__init__(transport, command_map)

    def ratio(self) -> tuple[np.ndarray, np.ndarray]:
        """Run one sweep; return the frequencies (Hz) and the complex ratio B/A."""
        data = self.sweep(("RATIO",))
        return data.f, data["RATIO"]
