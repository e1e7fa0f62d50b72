"""The work a plan implies: fixture batches, the ordered resumable steps, the plan as
stored in the run manifest, and the rough duration of the whole."""

from __future__ import annotations

from dataclasses import asdict
from typing import Any

from bench.procedure.plan_types import (
    FIXTURE_METHODS,
    GAIN_PHASE,
    SHUNT,
    SINGLE_MOUNT_METHODS,
    PartPlan,
    Placement,
    Plan,
    Step,
    bias_tag,
)


def batches(
    parts: tuple[PartPlan, ...], positions: tuple[int, ...]
) -> tuple[tuple[Placement, ...], ...]:
    batches: list[tuple[Placement, ...]] = []
    current: list[Placement] = []
    for part in parts:
        if not set(FIXTURE_METHODS) & set(part.methods):
            continue
        for sample in part.samples:
            if len(current) == len(positions):
                batches.append(tuple(current))
                current = []
            current.append(Placement(part.name, sample, positions[len(current)], len(batches)))
    if current:
        batches.append(tuple(current))
    return tuple(batches)


def steps(plan: Plan) -> tuple[Step, ...]:
    steps: list[Step] = []
    names = plan.step_names
    if "calibrate" in names:
        for std in plan.calibration.standards:
            steps.append(Step(id=f"calibrate/{std}", kind="calibrate", standard=std))
    used = sorted({p.position for batch in plan.batches for p in batch})
    gained = sorted(
        {
            p.position
            for batch in plan.batches
            for p in batch
            if GAIN_PHASE in plan.part(p.part).methods
        }
    )
    for kind in ("mount_open", "mount_short"):
        if kind in names:
            for pos in used:
                steps.append(Step(id=f"{kind}/p{pos}", kind=kind, position=pos))
            # The gain-phase analyser's own sweep of each strapped position it uses.
            if kind == "mount_short":
                for pos in gained:
                    steps.append(
                        Step(
                            id=f"mount_short/{GAIN_PHASE}/p{pos}",
                            kind=kind,
                            position=pos,
                            method=GAIN_PHASE,
                        )
                    )
    if "measure" in names:
        for batch in plan.batches:
            # The batch's gain-phase sweeps first, each sample where it sits, then the
            # network analyser's: the fixture moves between the two once per batch.
            for placement in batch:
                if GAIN_PHASE in plan.part(placement.part).methods:
                    steps.append(
                        Step(
                            id=f"measure/{placement.part}/{placement.sample}/{GAIN_PHASE}",
                            kind="measure",
                            position=placement.position,
                            placement=placement,
                            method=GAIN_PHASE,
                        )
                    )
            for placement in batch:
                part = plan.part(placement.part)
                if SHUNT not in part.methods:
                    continue
                for volts in part.bias:
                    steps.append(
                        Step(
                            id=f"measure/{placement.part}/{placement.sample}/{bias_tag(volts)}",
                            kind="measure",
                            position=placement.position,
                            placement=placement,
                            bias_v=volts,
                        )
                    )
    # Each single mount in turn: its own captures (the empty gap or open, then the strap),
    # then every sample measured on it, one at a time.
    for method in SINGLE_MOUNT_METHODS:
        parts = [p for p in plan.parts if method in p.methods]
        if not parts:
            continue
        for kind in ("mount_open", "mount_short"):
            if "mount_short" in names or "mount_open" in names:
                steps.append(Step(id=f"{kind}/{method}", kind=kind, method=method))
        if "measure" in names:
            for part in parts:
                for sample in part.samples:
                    steps.append(
                        Step(
                            id=f"measure/{part.name}/{sample}/{method}",
                            kind="measure",
                            placement=Placement(part.name, sample, 0, -1),
                            method=method,
                        )
                    )
    for name in ("fit", "export", "report"):
        if name in names:
            steps.append(Step(id=name, kind=name))
    return tuple(steps)


def resolved(plan: Plan) -> dict[str, Any]:
    """The plan in plain SI numbers, as stored in the run manifest."""
    extra = {"gain_phase": asdict(plan.gain_phase)} if plan.gain_phase is not None else {}
    return {
        **extra,
        "name": plan.name,
        "source": plan.source,
        "description": plan.description,
        "mode": plan.mode,
        "instruments": {k: asdict(v) for k, v in plan.instruments.items()},
        "sweep": asdict(plan.sweep),
        "fixture": asdict(plan.fixture),
        "calibration": asdict(plan.calibration),
        "analysis": asdict(plan.analysis),
        "bias": asdict(plan.bias),
        "parts": [
            {
                **asdict(p.spec),
                "samples": list(p.samples),
                "bias": list(p.bias),
                "methods": list(p.methods),
            }
            for p in plan.parts
        ],
        "steps": list(plan.step_names),
    }


def estimated_seconds(plan: Plan) -> float:
    """Duration of the whole plan (s) with a person at the bench, by the model of
    :mod:`bench.procedure.estimate` (the runner refines it with the analyser's own sweep
    time)."""
    from bench.procedure.estimate import estimate

    return estimate(plan, caution=plan.biased).total
