"""Instrument I/O: VISA transport, generic SCPI analyser, fixture switch, DC source.

Drivers know nothing of models or fitting."""
