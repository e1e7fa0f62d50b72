"""Helpers for end-to-end runs: a simulated bench on loopback, small procedures, a runner."""

from __future__ import annotations

import textwrap
from collections.abc import Callable, Iterator
from pathlib import Path
from typing import Any

import pytest

from bench.commands.run import new_store, with_resources
from bench.procedure.display import PlainDisplay
from bench.procedure.instruments import open_instruments
from bench.procedure.operators import ScriptedOperator
from bench.procedure.plan import Plan, load_plan, plan_from_text
from bench.procedure.runner import Runner
from bench.runstore import RunStore

# Simulated sweep, relay and charging times are compressed 100 times; the physics is not.
TIME_SCALE = 0.01

SMALL = """\
name: small
mode: unattended
instruments:
  analyzer: {max_power: 0 dBm, timeout: 2 s}
  dc_source: {max_voltage: 20 V, max_current: 20 mA, timeout: 1 s}
  switch: {timeout: 1 s}
  bench: {timeout: 1 s}
sweep: {start: 100 Hz, stop: 100 MHz, points: 101, if_bandwidth: 1 kHz, power: 0 dBm}
fixture:
  positions: 8
  isolation_transformer: true
  bias_tee_rating: 25 V
  dc_block_rating: 50 V
calibration: {method: through}
bias: {ramp_step: 2 V, ramp_dwell: 1 ms, settle: 5 ms, discharge: 5 ms, current_limit: 10 mA}
parts:
  - {name: MC22-6V3, kind: mlcc, nominal: 22u, tolerance: 20 %, rated_voltage: 6.3 V, samples: 2}
  - {name: PB345-7V1, kind: bulk, nominal: 345u, tolerance: 20 %, rated_voltage: 7.1 V, samples: 1}
steps: [calibrate, mount_short, measure, fit, export]
"""


# A bulk capacitor measured with the gain-phase analyser below 1 MHz and shunt-through above.
GAIN_PHASE = """\
name: gain-phase-bulk
mode: unattended
instruments:
  analyzer: {max_power: 0 dBm, timeout: 2 s}
  switch: {timeout: 1 s}
  bench: {timeout: 1 s}
  gain_phase: {command_map: gain_phase, timeout: 2 s}
sweep: {start: 100 kHz, stop: 100 MHz, points: 61, if_bandwidth: 1 kHz, power: 0 dBm}
gain_phase:
  start: 10 Hz
  stop: 1 MHz
  points: 41
  bandwidth: 100 Hz
  reference_resistor: 1 ohm
  input_resistance: 1 Mohm
  input_capacitance: 30 pF
  noise_floor: -100 dB
fixture: {positions: 8, isolation_transformer: true}
calibration: {method: through}
parts:
  - {name: PB345-7V1, kind: bulk, nominal: 345u, tolerance: 20 %, samples: 2,
     method: [gain-phase, shunt-through]}
steps: [calibrate, mount_short, measure, fit, export, report]
"""


@pytest.fixture
def sim() -> Iterator[Any]:
    """A fresh simulated demo bench on free loopback ports, stopped afterwards."""
    from simulated_instruments.server import start_bench

    bench = start_bench("demo", time_scale=TIME_SCALE, seed=7)
    try:
        yield bench
    finally:
        bench.stop()


def write_procedure(tmp_path: Path, text: str, name: str = "proc.yaml") -> Path:
    path = tmp_path / name
    path.parent.mkdir(parents=True, exist_ok=True)
    path.write_text(textwrap.dedent(text), encoding="utf-8")
    return path


def start_run(tmp_path: Path, text: str) -> tuple[Plan, RunStore]:
    """Validate ``text`` and create its run folder under ``tmp_path/runs``."""
    path = write_procedure(tmp_path, text)
    plan = load_plan(path)
    return plan, new_store(plan, path, tmp_path / "runs")


def reopen(store: RunStore) -> tuple[Plan, RunStore]:
    """The run folder and its plan as ``zbench run --resume`` would see them."""
    again = RunStore.open(store.root)
    return plan_from_text(again.procedure_text(), again.manifest["procedure"]["source"]), again


def run_on(
    sim: Any,
    plan: Plan,
    store: RunStore,
    *,
    operator: Callable[[Any], Any] | None = None,
    lines: list[str] | None = None,
) -> Runner:
    """Run ``plan`` into ``store`` on the simulated bench with a scripted operator."""
    plan = with_resources(plan, sim.resources)
    out = lines if lines is not None else []
    with open_instruments(plan, scripted=True) as instruments:
        hands = (operator or (lambda bench: ScriptedOperator(bench)))(instruments.bench)
        runner = Runner(plan, store, instruments, hands, PlainDisplay(out.append), assume_yes=True)
        runner.run()
    return runner


def raw_files(store: RunStore) -> dict[str, bytes]:
    """Every stored raw sweep (not the rejected ones) and its bytes."""
    return {p.name: p.read_bytes() for p in sorted((store.root / "raw").glob("*.s2p"))}


@pytest.fixture
def kit() -> Any:
    """The helpers above, for test modules (conftest is not importable by name)."""
    import types

    return types.SimpleNamespace(
        SMALL=SMALL,
        GAIN_PHASE=GAIN_PHASE,
        TIME_SCALE=TIME_SCALE,
        write_procedure=write_procedure,
        start_run=start_run,
        reopen=reopen,
        run_on=run_on,
        raw_files=raw_files,
    )
