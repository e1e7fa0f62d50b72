"""From the sweeps stored in a run folder to impedances, fits and the :class:`RunSummary`.

The runner calls this at its fit step and ``zbench reprocess`` calls it on a finished
run with other settings; both read only ``raw/`` and the manifest, never an instrument.
All the numbers come from :mod:`bench.core`; this module only finds the files, hands
arrays to the core and gathers the results. The calibration, the mount's short and open
and each sample's impedance are in :mod:`bench.procedure.corrections` (its names are
re-exported here).
"""

from __future__ import annotations

from collections.abc import Collection
from dataclasses import dataclass, replace
from typing import Any

import numpy as np

from bench import __version__
from bench.core.fixture import MountOpen
from bench.core.impedance import ImpedanceData
from bench.errors import FitError
from bench.parallel import ordered_map
from bench.plausibility import shared_screening
from bench.procedure.corrections import (
    Corrector,
    GroundLoopResult,
    OpenResult,
    averaged,
    fixture_removal_text,
    ground_loop,
    ground_loop_note,
    loop_removed_with_short,
    mount_open_impedance,
    mount_short_impedance,
    open_fit,
    sample_impedance,
)
from bench.procedure.plan import GAIN_PHASE, SHUNT, SINGLE_MOUNT_METHODS, Analysis, Plan, Step
from bench.results import RunSummary, SampleResult
from bench.runstore import DONE, RunStore
from bench.units import format_si


def z_at_nominal(spec: Any, data: ImpedanceData) -> float | None:
    """A bead's |Z| (Ω) at the frequency its nominal is stated at (``spec.nominal_at_hz``),
    by log-log interpolation of the measured points; None for other parts, without that
    frequency or when it lies outside the sweep."""
    if spec.kind != "bead" or not spec.nominal_at_hz:
        return None
    f = np.asarray(data.f, dtype=float)
    magnitude = np.abs(np.asarray(data.z))
    ok = np.isfinite(magnitude) & (magnitude > 0) & (f > 0)
    if np.count_nonzero(ok) < 2 or not f[ok][0] <= spec.nominal_at_hz <= f[ok][-1]:
        return None
    log_z = np.interp(np.log(spec.nominal_at_hz), np.log(f[ok]), np.log(magnitude[ok]))
    return float(np.exp(log_z))


def main_value(spec: Any, landmarks: dict[str, Any], data: ImpedanceData) -> float | None:
    """The value a part's tolerance is stated on, from the landmarks of its measured data
    (the live line, before any fit): ``c_low`` (F) for capacitors, ``l_low`` (H) for
    inductors, a bead's |Z| (Ω) at its stated frequency; None when there is none."""
    if spec.kind == "bead":
        return z_at_nominal(spec, data)
    value = landmarks.get("c_low" if spec.kind in ("mlcc", "bulk") else "l_low")
    return float(value) if isinstance(value, (int, float)) and np.isfinite(value) else None


def fit_sample(
    model: str, data: ImpedanceData, valid_above_hz: float = 0.0
) -> tuple[Any, str | None]:
    """Fit one sample; returns (FitResult or None, error text or None)."""
    try:
        from bench.core.fitting import fit_impedance
    except ImportError:
        return None, "fitting is not available in this build"
    try:
        # Points below a ground-loop corner are inside the window: left out, not counted
        # as outside it (the sample's own note counts them).
        fit = fit_impedance(
            data.f,
            data.z,
            model=model,
            rel_uncertainty=data.rel_uncertainty,
            valid=data.inside_window,
            excluded=np.asarray(data.f) < valid_above_hz,
        )
    except FitError as exc:
        return None, str(exc)
    return fit, None


def build_summary(
    store: RunStore,
    plan: Plan,
    *,
    analysis: Analysis | None = None,
    model_override: str | None = None,
    fit: bool = True,
    jobs: int | None = None,
    early: Any = None,
) -> RunSummary:
    """Recompute every sample of a run from its raw sweeps into a :class:`RunSummary`.

    ``analysis`` and ``model_override`` replace the procedure's settings (reprocess);
    measure steps that were skipped or never ran are left out, and said so in warnings.
    The samples are fitted on up to ``jobs`` processes (all cores when None); ``early``
    (:class:`bench.procedure.early_fit.EarlyFits`) holds fits made during the sweeps,
    used where their input is the very task built here.
    """
    analysis = analysis or plan.analysis
    fixture = prepare_fixture(store, plan, analysis)
    warnings = fixture.warnings
    shorts, loops, opens, mounts = fixture.shorts, fixture.loops, fixture.opens, fixture.mounts
    groups: dict[tuple[str, str, float], list[Step]] = {}
    for step in plan.steps:
        if step.kind != "measure":
            continue
        state = store.step_state(step.id)
        if state != DONE:
            warnings.append(f"{step.id}: {state}, not in the results")
            continue
        assert step.placement is not None
        key = (step.placement.part, step.placement.sample, step.bias_v)
        groups.setdefault(key, []).append(step)
    unfitted = [
        sample_and_task(store, plan, analysis, fixture, steps, model_override)
        for steps in groups.values()
    ]
    samples = [sample for sample, _ in unfitted]
    if fit:
        # The fits run on up to `jobs` processes (all cores by default), in sample order;
        # those fitted already during the sweeps (``early``) are taken as they came.
        tasks = [task for _, task in unfitted]
        if early is not None:
            keys = [tuple(step.id for step in steps) for steps in groups.values()]
            fits = early.fits(keys, tasks, jobs)
        else:
            fits = ordered_map(fit_task, tasks, jobs)
        samples = [
            replace(
                sample,
                fit=result,
                fit_error=error,
                warnings=(*sample.warnings, *(getattr(result, "warnings", ()) or ())),
            )
            for sample, (result, error) in zip(samples, fits, strict=True)
        ]
        # One family per lot: samples of an `auto` part refitted with the lot's family.
        from bench.procedure.lot_family import one_family_per_lot

        samples = one_family_per_lot(
            samples,
            [task for _, task in unfitted],
            lambda tasks: ordered_map(fit_task, tasks, jobs),
        )
        shared = shared_screening(samples)
        if shared is not None:
            warnings.append(shared)
    loop_info = {
        str(pos): {
            "detected": r.detected,
            "valid_above_hz": r.valid_above_hz,
            "message": r.message,
        }
        for pos, r in loops.items()
    }
    for r in loops.values():
        if r.detected:
            warnings.append(ground_loop_note(r, analysis))
    if plan.fixture.series_r > 0 and plan.calibration.method != "through":
        warnings.append(
            "SOLT with port series resistors calibrates them out: the corrected data are "
            "put back on the Z0 + Rs scale, but the correction amplifies the trace noise "
            "of the reflections through the resistors; a through calibration is the "
            "quieter choice with resistors"
        )
    manifest = store.manifest
    return RunSummary(
        run_id=store.run_id,
        procedure_name=plan.name,
        parts=tuple(p.spec for p in plan.parts),
        samples=tuple(samples),
        setup={
            "procedure": plan.source,
            "mode": plan.mode,
            "sweep": manifest["procedure"]["sweep"],
            "fixture": manifest["procedure"]["fixture"],
            "analysis": {
                "noise_floor_db": analysis.noise_floor_db,
                "trace_noise_db": analysis.trace_noise_db,
                "tolerance": analysis.tolerance,
                "mount": analysis.mount,
            },
            "fixture_removal": fixture_removal_text(bool(shorts), bool(fixture.pads)),
            **(
                {"single_mounts": {m: c.removal_text() for m, c in mounts.items()}}
                if mounts
                else {}
            ),
            **({"mount_open": {str(p): r.record() for p, r in opens.items()}} if opens else {}),
            "instruments": manifest.get("instruments", {}),
            "created": manifest.get("created"),
        },
        calibration=dict(manifest.get("calibration", {})),
        ground_loop=loop_info,
        warnings=tuple(dict.fromkeys([*_stored_warnings(manifest, opens, loops), *warnings])),
        software_version=__version__,
    )


@dataclass
class Fixture:
    """What the samples' corrections share: the calibration, each position's mount short
    (with its ground-loop check) and pads, the gain-phase straps, the single mounts'
    captures, and the warnings about what is missing."""

    corrector: Corrector
    warnings: list[str]
    shorts: dict[int, np.ndarray]
    loops: dict[int, GroundLoopResult]
    opens: dict[int, OpenResult]
    pads: dict[int, MountOpen]
    gain_phase: dict[int, np.ndarray | None]
    mounts: dict[str, Any]


def prepare_fixture(
    store: RunStore,
    plan: Plan,
    analysis: Analysis,
    positions: Collection[int] | None = None,
    methods: Collection[str] | None = None,
) -> Fixture:
    """The :class:`Fixture` of a run from its stored captures: every position and single
    mount, or only ``positions`` and ``methods`` (one sample's, fitted early)."""
    corrector = Corrector.from_store(store, plan)
    warnings: list[str] = list(corrector.warnings)
    shorts: dict[int, np.ndarray] = {}
    loops: dict[int, GroundLoopResult] = {}
    from bench.procedure import methods as single

    def wanted(step: Step) -> bool:
        return step.position is not None and (positions is None or step.position in positions)

    gain_phase_shorts: dict[int, np.ndarray | None] = {}
    for step in plan.steps:
        if step.kind != "mount_short" or not wanted(step):
            continue
        assert step.position is not None
        if step.method == GAIN_PHASE:
            z_gp = single.gain_phase_short(plan, store, step.position)
            gain_phase_shorts[step.position] = z_gp
            if z_gp is None:
                warnings.append(
                    f"no gain-phase capture of the mount short at position {step.position}; "
                    "not removed from the gain-phase sweeps"
                )
            continue
        if store.step_state(step.id) != DONE:
            warnings.append(f"no mount short for position {step.position}; not removed")
            continue
        f, z_short = mount_short_impedance(plan, corrector, store, step.position)
        shorts[step.position] = z_short
        loops[step.position] = ground_loop(f, z_short, step.position)
    opens: dict[int, OpenResult] = {}
    for step in plan.steps:
        if step.kind != "mount_open" or not wanted(step):
            continue
        assert step.position is not None
        if store.step_state(step.id) != DONE:
            warnings.append(
                f"no open capture for position {step.position}; pads' capacitance not removed"
            )
            continue
        result = open_fit(
            plan, analysis, corrector, store, step.position, shorts.get(step.position)
        )
        opens[step.position] = result
        if result.mount_open is None:
            warnings.append(result.message)
    pads = {pos: r.mount_open for pos, r in opens.items() if r.mount_open is not None}
    mounts = {
        m: single.captures(plan, corrector, store, m)
        for m in SINGLE_MOUNT_METHODS
        if any(s.method == m for s in plan.steps) and (methods is None or m in methods)
    }
    for m, captured in mounts.items():
        for kind, value in (("mount_open", captured.open), ("mount_short", captured.short)):
            if value is None:
                warnings.append(
                    f"no {single.CAPTURE_WORDS[(m, kind)]} capture of the {m} mount; not removed"
                )
    return Fixture(corrector, warnings, shorts, loops, opens, pads, gain_phase_shorts, mounts)


def sample_and_task(
    store: RunStore,
    plan: Plan,
    analysis: Analysis,
    fixture: Fixture,
    steps: list[Step],
    model_override: str | None,
) -> tuple[SampleResult, tuple[str, ImpedanceData, float]]:
    """One sample and bias point (its measure steps) before its fit, and the fit's task."""
    f = fixture
    if len(steps) == 1 and steps[0].method == SHUNT:
        return _sample(
            store, plan, analysis, f.corrector, steps[0], f.shorts, f.pads, f.loops, model_override
        )
    shunt = {"shorts": f.shorts, "pads": f.pads, "loops": f.loops, "gain_phase": f.gain_phase}
    return _setups_sample(
        store, plan, analysis, f.corrector, steps, shunt, f.mounts, model_override
    )


def _stored_warnings(
    manifest: dict[str, Any],
    opens: dict[int, OpenResult],
    loops: dict[int, GroundLoopResult] | None = None,
) -> list[str]:
    """The run's own warnings, less its verdicts on the opens and ground loops processing
    has just redone (the run judged the opens before the mount short existed, and a
    reprocess may judge a loop with another mount setting)."""
    redone = tuple(f"position {pos}: open not used" for pos in opens) + tuple(
        f"position {pos}: ground loop" for pos in loops or {}
    )
    return [w for w in manifest.get("warnings", []) if not (redone and w.startswith(redone))]


def _sample(
    store: RunStore,
    plan: Plan,
    analysis: Analysis,
    corrector: Corrector,
    step: Step,
    shorts: dict[int, np.ndarray],
    pads: dict[int, MountOpen],
    loops: dict[int, GroundLoopResult],
    model_override: str | None,
) -> tuple[SampleResult, tuple[str, ImpedanceData, float]]:
    """A sample's result before its fit, and the fit's task (model, data, valid above)."""
    placement = step.placement
    assert placement is not None
    f, s_raw = averaged(store, step.id)
    corrected = corrector.correct(f, s_raw)
    s21n = corrector.setup_s21(f, corrected)
    position = step.position or 0
    data = sample_impedance(plan, analysis, f, s21n, shorts.get(position), pads.get(position))
    loop = loops.get(step.position or 0)
    detected = loop is not None and loop.detected
    removed = detected and loop_removed_with_short(analysis) and step.position in shorts
    valid_above = loop.valid_above_hz if detected and not removed else 0.0
    part = plan.part(placement.part)
    model = model_override or part.spec.model
    notes: tuple[str, ...] = ()
    if removed:
        notes = ("ground loop: removed with the measured mount short (all points kept)",)
    elif valid_above:
        # Inside the window but left out: counted here, not among the points outside it.
        inside = np.asarray(data.inside_window, dtype=bool)
        below = int(np.count_nonzero(inside & (f < valid_above)))
        notes = (
            f"ground loop: {below} point{'s' if below != 1 else ''} below "
            f"{format_si(valid_above, 'Hz')} not used (a fitted mount cannot follow the loop)",
        )
    files = store.step_files(step.id)
    sample = SampleResult(
        part=placement.part,
        sample=placement.sample,
        data=data,
        fit=None,
        bias_v=step.bias_v,
        position=placement.position,
        raw_file=files[0] if files else None,
        corrected_s=corrected,
        warnings=notes,
    )
    return sample, (model, data, valid_above)


def fit_task(task: tuple[str, ImpedanceData, float]) -> tuple[Any, str | None]:
    """:func:`fit_sample` of one (model, data, valid above) task: a worker's job."""
    return fit_sample(*task)


def with_analysis(plan: Plan, **changes: Any) -> Analysis:
    """The plan's analysis settings with some replaced (None values are ignored)."""
    return replace(plan.analysis, **{k: v for k, v in changes.items() if v is not None})


def _setups_sample(
    store: RunStore,
    plan: Plan,
    analysis: Analysis,
    corrector: Corrector,
    steps: list[Step],
    shunt: dict[str, Any],
    mounts: dict[str, Any],
    model_override: str | None,
) -> tuple[SampleResult, tuple[str, ImpedanceData, float]]:
    """One sample measured on a single mount, or several ways and stitched into one curve
    (before its fit, and the fit's task); each set-up's data, with its own window, is
    kept in ``setups``."""
    from bench.procedure import methods as single

    first = steps[0]
    assert first.placement is not None
    setups: list[tuple[str, ImpedanceData]] = []
    notes: list[str] = []
    position: int | None = None
    corrected = None
    raw_file = None
    for step in steps:
        files = store.step_files(step.id)
        raw_file = raw_file or (files[0] if files else None)
        if step.method == SHUNT:
            r, _ = _sample(
                store,
                plan,
                analysis,
                corrector,
                step,
                shunt["shorts"],
                shunt["pads"],
                shunt["loops"],
                None,
            )
            setups.append((SHUNT, r.data))
            notes.extend(r.warnings)
            position, corrected = r.position, r.corrected_s
            continue
        f, s_raw = averaged(store, step.id)
        if step.method == GAIN_PHASE:
            z_short = shunt["gain_phase"].get(step.position or 0)
            data = single.gain_phase_impedance(plan, analysis, f, s_raw[:, 1, 0], z_short)
            setups.append((GAIN_PHASE, data))
            position = position if position is not None else step.position
            continue
        data = single.single_mount_impedance(
            plan, analysis, corrector, step.method, f, s_raw, mounts[step.method]
        )
        setups.append((step.method, data))
    data, disagreements = single.stitch_setups(setups)
    notes.extend(disagreements)
    part = plan.part(first.placement.part)
    model = model_override or part.spec.model
    sample = SampleResult(
        part=first.placement.part,
        sample=first.placement.sample,
        data=data,
        fit=None,
        bias_v=first.bias_v,
        position=position,
        raw_file=raw_file,
        corrected_s=corrected if len(setups) == 1 else None,
        warnings=tuple(dict.fromkeys(notes)),
        setups=tuple(setups),
    )
    return sample, (model, data, 0.0)


__all__ = [
    "Corrector",
    "Fixture",
    "GroundLoopResult",
    "OpenResult",
    "averaged",
    "build_summary",
    "fit_sample",
    "fixture_removal_text",
    "ground_loop",
    "ground_loop_note",
    "loop_removed_with_short",
    "main_value",
    "mount_open_impedance",
    "mount_short_impedance",
    "open_fit",
    "prepare_fixture",
    "sample_and_task",
    "sample_impedance",
    "with_analysis",
    "z_at_nominal",
]
