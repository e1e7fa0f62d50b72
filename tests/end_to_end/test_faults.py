"""Faults injected by the simulated bench: each run stops with a clear message, keeps every
stored sweep, and completes on resume. DC bias never passes its limits, nor stays on."""

from __future__ import annotations

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from bench.errors import ProcedureError, RunError
from bench.procedure.loader import parse_text, validate_document
from bench.procedure.operators import ScriptedOperator
from bench.procedure.plan import build_plan


class Saboteur(ScriptedOperator):
    """Scripted hands that arm one fault through the bench-control port when parts go in."""

    def __init__(self, bench, command: str):
        super().__init__(bench)
        self.command: str | None = command

    def load_parts(self, placements):
        super().load_parts(placements)
        if self.command:
            self.bench.write_checked(self.command)
            self.command = None


FAULTS = [
    # (what, FAULt command, words expected in the message)
    ("connection cut mid-sweep", "FAULt:DROP analyzer,3", "instrument"),
    ("timeout", "FAULt:DELay analyzer,1.5,1", "instrument"),
    ("corrupt block", "FAULt:BLOCk analyzer,1", "instrument"),
    ("instrument error", 'FAULt:ERRor analyzer,-222,"Data out of range"', "-222"),
]


def _small(kit) -> str:
    # A short I/O timeout, so the delayed answer counts as a timeout quickly.
    return kit.SMALL.replace("timeout: 2 s", "timeout: 500 ms")


@pytest.mark.parametrize(("what", "fault", "words"), FAULTS, ids=[f[0] for f in FAULTS])
def test_fault_leaves_a_resumable_run(tmp_path, sim, kit, what, fault, words):
    plan, store = kit.start_run(tmp_path, _small(kit))
    with pytest.raises(RunError) as info:
        kit.run_on(sim, plan, store, operator=lambda bench: Saboteur(bench, fault))
    message = str(info.value)
    assert words in message, message
    assert f"zbench run --resume {store.root}" in message
    plan2, store2 = kit.reopen(store)
    assert store2.manifest["state"] == "stopped"
    first = store2.first_incomplete()
    assert first is not None and first.startswith("measure/"), first
    kept = kit.raw_files(store2)
    assert "cal_through.s2p" in kept and "short_p1.s2p" in kept

    kit.run_on(sim, plan2, store2)
    assert store2.manifest["state"] == "complete"
    after = kit.raw_files(store2)
    assert all(after[name] == data for name, data in kept.items()), "a stored sweep changed"
    assert len(after) == 7
    assert len(store2.manifest["sessions"]) == 2


def _bias_text(kit) -> str:
    text = kit.SMALL.replace("samples: 2}", "samples: 2, bias: [0 V, 3 V, 6.3 V]}")
    return "\n".join(line for line in text.splitlines() if "PB345" not in line) + "\n"


def _watch(sim) -> list[float]:
    """Every setpoint the simulated source holds while its output is on (the truth)."""
    seen: list[float] = [0.0]
    bias = sim.state.bias
    original = bias.change

    def change(now, **settings_):
        original(now, **settings_)
        if bias.output:
            seen.append(bias.setpoint)

    bias.change = change
    return seen


@pytest.mark.parametrize(
    "fault",
    [
        "FAULt:DROP dc_source,3",
        "FAULt:DROP analyzer,12",
        'FAULt:ERRor dc_source,-222,"Data out of range"',
    ],
    ids=["source link cut", "analyser link cut while biased", "source error"],
)
def test_faults_never_leave_bias_on(tmp_path, sim, kit, fault):
    plan, store = kit.start_run(tmp_path, _bias_text(kit))
    seen = _watch(sim)
    with pytest.raises(RunError):
        kit.run_on(sim, plan, store, operator=lambda bench: Saboteur(bench, fault))
    assert sim.state.bias.output is False, "output left on after a fault"
    assert max(seen) <= 6.3 + 1e-12
    # and the resumed run finishes with the output off
    plan2, store2 = kit.reopen(store)
    kit.run_on(sim, plan2, store2)
    assert store2.manifest["state"] == "complete"
    assert sim.state.bias.output is False
    assert max(seen) <= 6.3 + 1e-12


BIAS_DOC = """\
name: b
instruments:
  dc_source: {{max_voltage: {source} V, max_current: 20 mA}}
sweep: {{start: 1 kHz, stop: 10 MHz, points: 11}}
fixture: {{positions: 2, bias_tee_rating: {tee} V, dc_block_rating: {block} V}}
parts:
  - {{name: P, kind: mlcc, rated_voltage: {rated} V, samples: 1, bias: [{points}]}}
"""


@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(
    rated=st.floats(0.5, 100),
    tee=st.floats(0.5, 100),
    block=st.floats(0.5, 100),
    source=st.floats(0.5, 100),
    points=st.lists(st.floats(-5, 120), min_size=1, max_size=6),
)
def test_no_procedure_values_pass_a_bias_limit(rated, tee, block, source, points):
    text = BIAS_DOC.format(
        rated=f"{rated:.6g}",
        tee=f"{tee:.6g}",
        block=f"{block:.6g}",
        source=f"{source:.6g}",
        points=", ".join(f"{p:.6g} V" for p in points),
    )
    doc = parse_text(text, "b.yaml")
    assert not validate_document(doc)
    limit = min(float(f"{v:.6g}") for v in (rated, tee, block, source))
    try:
        plan = build_plan(doc)
    except ProcedureError as exc:
        # Rejected: some point is negative or above the lowest rating, or repeats another
        # (one step per bias point), and it says which.
        written = [f"{p:.6g}" for p in points]
        repeated = len(set(written)) < len(written)
        assert repeated or any(
            float(w) > limit or p < 0 for w, p in zip(written, points, strict=True)
        ), str(exc)
        return
    for step in plan.steps:
        assert 0.0 <= step.bias_v <= limit
