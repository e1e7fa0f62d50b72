"""Open the instruments a plan names, each on its own VISA transport, and close them all."""

from __future__ import annotations

import contextlib
from collections.abc import Iterator
from dataclasses import dataclass, field
from typing import Any

from bench.errors import InputError
from bench.procedure.plan import Plan


@dataclass
class BenchInstruments:
    """The opened instruments of a run; ``switch``, ``dc_transport``, ``bench`` and
    ``gain_phase`` may be None."""

    analyzer: Any
    switch: Any = None
    dc_transport: Any = None
    bench: Any = None
    transports: list[Any] = field(default_factory=list)
    gain_phase: Any = None

    def snapshot(self) -> dict[str, Any]:
        """Identities and settings for the manifest (best effort per instrument)."""
        info: dict[str, Any] = {"analyzer": self.analyzer.snapshot()}
        if self.gain_phase is not None:
            try:
                info["gain_phase"] = self.gain_phase.snapshot()
            except Exception as exc:  # provenance, not a reason to stop
                info["gain_phase"] = {"error": str(exc)}
        for role, inst in (("switch", self.switch), ("bench", self.bench)):
            if inst is not None:
                try:
                    info[role] = {"identity": inst.identify(), "resource": inst.resource_name}
                except Exception as exc:  # an identity is provenance, not a reason to stop
                    info[role] = {"error": str(exc)}
        if self.dc_transport is not None:
            info["dc_source"] = {"resource": self.dc_transport.resource_name}
        return info


def needed_roles(plan: Plan, *, scripted: bool) -> list[str]:
    """The instruments a plan needs: the analyser, the fixture switch (a fixture of more
    than one position, or whenever a switch resource is named), a DC source for biased
    parts, the gain-phase analyser for parts measured with it, and the bench-control port
    when a scripted operator does the hands."""
    roles = ["analyzer"]
    if plan.gain_phase is not None:
        roles.append("gain_phase")
    if plan.fixture.positions > 1 or plan.instruments["switch"].resource:
        roles.append("switch")
    if plan.biased:
        roles.append("dc_source")
    if scripted:
        roles.append("bench")
    return roles


@contextlib.contextmanager
def open_instruments(plan: Plan, *, scripted: bool) -> Iterator[BenchInstruments]:
    """Open every needed instrument of ``plan``; close them all on the way out."""
    from drivers.analyzer import NetworkAnalyzer
    from drivers.bench_control import BenchControl
    from drivers.gain_phase import GainPhaseAnalyzer
    from drivers.instrument_maps import load_instrument_map
    from drivers.switch import FixtureSwitch
    from drivers.transport import VisaTransport, clear_all

    roles = needed_roles(plan, scripted=scripted)
    for role in roles:
        if not plan.instruments[role].resource:
            raise InputError(
                f"instruments.{role}.resource is not given",
                path=plan.source,
                hint=f"add the VISA resource of the {role.replace('_', ' ')} to the procedure, "
                "or run against the simulated bench with --sim",
            )
    transports: list[Any] = []
    try:
        # Every link opened first and cleared together (one quiet window for the bench,
        # not one per instrument), before any driver speaks to its instrument.
        links = {}
        for role in roles:
            inst = plan.instruments[role]
            links[role] = VisaTransport.open(inst.resource, timeout_s=inst.timeout_s, clear=False)
            transports.append(links[role])
        clear_all(transports)

        def link(role: str) -> Any:
            return links[role]

        analyzer = NetworkAnalyzer(link("analyzer"), plan.instruments["analyzer"].command_map)
        switch = None
        if "switch" in roles:
            commands = load_instrument_map("switch", plan.instruments["switch"].command_map)
            switch = FixtureSwitch(link("switch"), plan.fixture.positions, commands=commands)
        dc = link("dc_source") if "dc_source" in roles else None
        bench = BenchControl(link("bench")) if "bench" in roles else None
        gain_phase = None
        if "gain_phase" in roles:
            gain_phase = GainPhaseAnalyzer(
                link("gain_phase"), plan.instruments["gain_phase"].command_map
            )
        yield BenchInstruments(analyzer, switch, dc, bench, transports, gain_phase)
    finally:
        for transport in reversed(transports):
            with contextlib.suppress(Exception):
                transport.close()
