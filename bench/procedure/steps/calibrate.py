"""The calibration step: each standard swept and stored raw; an earlier run's
calibration reused when the plan allows and it still fits."""

from __future__ import annotations

import dataclasses
import datetime as _dt
from pathlib import Path
from typing import Any

import numpy as np

from bench.errors import InputError
from bench.files import atomic_write_bytes
from bench.procedure.plan import Step
from bench.procedure.steps.context import RunContext
from bench.procedure.steps.sweep import cables_to, checked_capture_done, sweeps
from bench.runstore import DONE, LAST_CALIBRATION, RUNNING, RunStore, parse_iso
from bench.units import format_si


def calibrate(ctx: RunContext, step: Step) -> None:
    assert step.standard is not None
    plan, store = ctx.plan, ctx.store
    while True:
        cables_to(ctx, step.standard)
        sweeps(ctx, step, f"calibration: {step.standard}")
        f, s = ctx.last_average()
        s21 = s[:, 1, 0]
        result = f"|S21| {20 * np.log10(np.median(np.abs(s21)) + 1e-300):.2f} dB (median)"
        problem = check_standard(ctx, step.standard, f, s)
        if checked_capture_done(ctx, step, f"calibration {step.standard}", problem, result):
            break
        if problem is not None:
            ctx.cables = None  # the hands are asked to connect the standard again
    if step.standard == plan.calibration.standards[-1]:
        store.update(
            "calibration",
            {
                "method": plan.calibration.method,
                "crossover_hz": plan.calibration.crossover_hz,
                "kit": dataclasses.asdict(plan.calibration.kit),
                "standards": {
                    std: store.step_files(f"calibrate/{std}") for std in plan.calibration.standards
                },
                "time": _dt.datetime.now(_dt.timezone.utc).isoformat(timespec="seconds"),
            },
        )


def check_standard(ctx: RunContext, standard: str, f: np.ndarray, s: np.ndarray) -> str | None:
    """Whether a calibration standard's raw capture looks like that standard."""
    from bench.plausibility import check_reflection, check_through

    fixture = ctx.plan.fixture
    if standard == "through":
        return check_through(f, s, z0=fixture.z0, series_r=fixture.series_r)
    if standard in ("short", "open", "load"):
        load = ctx.plan.calibration.kit.load_resistance or fixture.z0
        return check_reflection(
            standard, f, s, z0=fixture.z0, series_r=fixture.series_r, load_ohm=load
        )
    return None


def maybe_reuse(ctx: RunContext) -> None:
    """Copy an earlier run's standards in when the plan names one that still fits."""
    cal = ctx.plan.calibration
    cal_steps = [s for s in ctx.plan.steps if s.kind == "calibrate"]
    if not cal.reuse_run or not cal_steps:
        return
    if all(ctx.store.step_state(s.id) == DONE for s in cal_steps):
        return
    path = reuse_path(ctx)
    if not path.exists():
        # The first run of a lot: nothing to reuse yet, and nothing is wrong.
        text = f"no earlier calibration found at {path}; taking a new one"
        ctx.display.message(text)
        ctx.store.log(text)
        return
    reason = reuse_problem(ctx)
    if reason is not None:
        ctx.display.message(f"calibration not reused: {reason}; calibrating anew")
        ctx.store.log(f"calibration not reused: {reason}")
        return
    old = RunStore.open(path)
    store = ctx.store
    for step in cal_steps:
        store.mark(step.id, RUNNING)
        for relative in old.step_files(step.id):
            target = store.root / relative
            atomic_write_bytes(target, (old.root / relative).read_bytes())
            store._step(step.id)["files"].append(relative)
        store.mark(step.id, DONE, reused_from=str(old.root))
    store.update(
        "calibration",
        {**old.manifest.get("calibration", {}), "reused_from": str(old.root)},
    )
    ctx.display.message(f"calibration reused from {old.root}")
    store.log(f"calibration reused from {old.root}")


def point_last_calibration(ctx: RunContext) -> None:
    """Once every standard is stored, let later runs find this calibration by name."""
    cal_steps = [s.id for s in ctx.plan.steps if s.kind == "calibrate"]
    if not all(ctx.store.step_state(i) == DONE for i in cal_steps):
        return
    try:
        link = ctx.store.point_latest()
    except OSError as exc:  # a file system without links: reuse by run folder still works
        ctx.store.log(f"could not point {LAST_CALIBRATION} at this run ({exc})")
        return
    ctx.store.log(f"{link} now points at this run's calibration")


def reuse_path(ctx: RunContext) -> Path:
    given = Path(ctx.plan.calibration.reuse_run or "")
    if not given.is_absolute() and not given.exists():
        beside = Path(ctx.plan.source).parent / given
        if beside.exists():
            return beside
    return given


def reuse_problem(ctx: RunContext) -> str | None:
    """Why the named calibration cannot be reused, or None when it can."""
    path = reuse_path(ctx)
    try:
        old = RunStore.open(path)
    except InputError as exc:
        return f"{path}: {str(exc).splitlines()[0]}"
    try:
        problems = calibration_mismatch(old.manifest["procedure"], ctx.plan.resolved)
    except (KeyError, TypeError, ValueError, AttributeError):
        return f"{path}: its manifest does not describe a zbench calibration"
    if problems:
        return "; ".join(problems)
    times = []
    for step in ctx.plan.steps:
        if step.kind != "calibrate":
            continue
        try:
            info = old.step_info(step.id)
        except KeyError:
            return f"{path} has no {step.id} step"
        if info["state"] != DONE or "finished" not in info:
            return f"{path}: {step.id} was not completed"
        times.append(parse_iso(info["finished"]))
    age = (_dt.datetime.now(_dt.timezone.utc) - min(times)).total_seconds()
    if age > ctx.plan.calibration.max_age_s:
        allowed = ctx.plan.calibration.max_age_s / 3600
        return f"it is {age / 3600:.1f} h old, more than the {allowed:g} h allowed"
    return None


def calibration_mismatch(old: dict[str, Any], new: dict[str, Any]) -> list[str]:
    """Settings of a stored calibration that differ from the new plan's (empty: reusable)."""
    problems = []
    for section, keys in (
        ("sweep", ("start", "stop", "points", "spacing", "if_bandwidth", "power")),
        ("fixture", ("series_r", "isolation_transformer", "z0")),
        ("calibration", ("method", "crossover_hz")),
    ):
        for key in keys:
            a = old.get(section, {}).get(key)
            b = new.get(section, {}).get(key)
            if a != b:
                was, now = _setting_text(key, a), _setting_text(key, b)
                problems.append(f"{section}.{key} was {was}, the plan has {now}")
    return problems


#: Units of the calibration settings :func:`calibration_mismatch` compares.
_SETTING_UNITS = {
    "start": "Hz",
    "stop": "Hz",
    "if_bandwidth": "Hz",
    "crossover_hz": "Hz",
    "series_r": "Ω",
    "z0": "Ω",
}


def _setting_text(key: str, value: Any) -> str:
    """A stored setting as an engineer writes it: ``1 kHz``, ``0 dBm``, ``log``, ``none``."""
    if value is None:
        return "none"
    if isinstance(value, bool):
        return "yes" if value else "no"
    if isinstance(value, (int, float)):
        if key in _SETTING_UNITS:
            return format_si(float(value), _SETTING_UNITS[key])
        return f"{value:g} dBm" if key == "power" else f"{value:g}"
    return str(value)
