"""The simulated instruments: network analyser, fixture switch, DC bias source and the
bench-control port (the scripted operator's hands). Each speaks SCPI through
:class:`simulated_instruments.scpi.Instrument` and acts on one shared
:class:`simulated_instruments.state.BenchState`."""

from simulated_instruments.instruments.analyzer import Analyzer
from simulated_instruments.instruments.analyzer_meas_stim import MeasStimAnalyzer
from simulated_instruments.instruments.bench_control import BenchControl
from simulated_instruments.instruments.dc_source import DcSource
from simulated_instruments.instruments.switch import Switch

__all__ = ["Analyzer", "BenchControl", "DcSource", "MeasStimAnalyzer", "Switch"]

#: The analyser class of each scenario ``analyzer.dialect``.
ANALYZERS = {"default": Analyzer, "meas_stim": MeasStimAnalyzer}
