"""The fixture moves between the network analyser and the gain-phase analyser in a run: the
hands are asked to connect the gain-phase analyser before its sweeps and the network
analyser's cables again after them; the gain-phase strap capture is checked like the
network analyser's mount short (a guided operator is asked to repeat, an unattended run
stops with the reason)."""

from __future__ import annotations

import pytest

from bench.errors import RunError
from bench.procedure import estimate
from bench.procedure.operators import ConsoleOperator, ScriptedOperator
from bench.runstore import DONE
from tests.end_to_end.conftest import GAIN_PHASE

# Lean: one sample in one position, few points; no fit.
GAIN_PHASE_ONE = (
    GAIN_PHASE.replace("points: 61", "points: 21")
    .replace("points: 41", "points: 11")
    .replace("samples: 2", "samples: 1")
    .replace("fixture: {positions: 8,", "fixture: {positions: 8, use_positions: [1],")
    .replace("measure, fit, export, report]", "measure]")
)


class _KeepsTheAnalyser(ScriptedOperator):
    """Hands that leave the fixture on the network analyser's cables when asked to move it
    to the gain-phase analyser (the first ``forget`` times)."""

    def __init__(self, bench, *, forget: int = 99, **kwargs):
        super().__init__(bench, **kwargs)
        self.forget = forget

    def connect_gain_phase(self):
        if self.forget > 0:
            self.forget -= 1
            self.actions.append("(fixture left on the network analyser)")
            return
        super().connect_gain_phase()


def test_the_hands_move_the_fixture_to_the_gain_phase_analyser_and_back(tmp_path, sim, kit):
    plan, store = kit.start_run(tmp_path, GAIN_PHASE_ONE.replace("unattended", "guided"))
    hands: list[ScriptedOperator] = []

    def operator(bench):
        hands.append(ScriptedOperator(bench, guided=True))
        return hands[0]

    kit.run_on(sim, plan, store, operator=operator)
    actions = [a for a in hands[0].actions if a.startswith(("cables:", "fixture:"))]
    # Through, then the network analyser's short, the gain-phase analyser's short, the
    # sample on the gain-phase analyser, and back to the network analyser for its sweep.
    assert actions == [
        "cables: the two cable ends joined with the THROUGH adapter",
        "cables: on the fixture",
        "fixture: on the gain-phase analyser",
        "cables: on the fixture",
    ]
    assert all(store.step_state(s.id) == DONE for s in plan.steps)
    # The time estimate allows a person one connection for each of these moves.
    assert estimate.actions(plan, plan.steps)[0] == len(actions)


def test_the_console_asks_for_the_gain_phase_analyser_and_back():
    said: list[str] = []
    console = ConsoleOperator(ask=lambda prompt: "", say=said.append)
    console.connect_gain_phase()
    console.connect_fixture()
    console.connect_fixture()
    assert "connect the GAIN-PHASE ANALYSER" in said[0]
    assert "Disconnect the network analyser's cables from the fixture" in said[0]
    assert said[1].startswith("Disconnect the gain-phase analyser from the fixture.")
    assert "network-analyser cables to the fixture" in said[1]
    assert not said[2].startswith("Disconnect")  # only once, after the gain-phase analyser


def test_a_fixture_left_on_the_network_analyser_stops_an_unattended_run(tmp_path, sim, kit):
    plan, store = kit.start_run(tmp_path, GAIN_PHASE_ONE)
    with pytest.raises(
        RunError,
        match=r"implausible gain-phase mount short 1: .*gain-phase analyser connected",
    ):
        kit.run_on(sim, plan, store, operator=lambda bench: _KeepsTheAnalyser(bench))
    assert store.step_state("mount_short/gain-phase/p1") != DONE
    # The implausible sweep is kept aside, not adopted by a resume.
    assert not list((store.root / "raw").glob("short_gain-phase_p1*.s2p"))


def test_a_guided_operator_is_told_and_a_repeat_fixes_it(tmp_path, sim, kit):
    plan, store = kit.start_run(tmp_path, GAIN_PHASE_ONE.replace("unattended", "guided"))
    seen: list[tuple[str, str]] = []

    def decide(label, result):
        seen.append((label, result))
        return "repeat" if result.startswith("IMPLAUSIBLE") else "continue"

    hands: list[ScriptedOperator] = []

    def operator(bench):
        hands.append(_KeepsTheAnalyser(bench, forget=1, guided=True, decide=decide))
        return hands[0]

    kit.run_on(sim, plan, store, operator=operator)
    shorts = [r for label, r in seen if label == "gain-phase mount short 1"]
    assert len(shorts) == 2
    assert shorts[0].startswith("IMPLAUSIBLE: the gain-phase analyser reads the mount short")
    assert "Repeat" in shorts[0] and not shorts[1].startswith("IMPLAUSIBLE")
    # On the repeat the hands were asked for the gain-phase analyser again, and did it.
    assert hands[0].actions.count("fixture: on the gain-phase analyser") == 1
    assert "(fixture left on the network analyser)" in hands[0].actions
    assert not any(w.startswith("implausible") for w in store.manifest.get("warnings", []))
    assert store.step_state("measure/PB345-7V1/s1/gain-phase") == DONE
