"""The steps after the sweeps: fit every sample, write the exports and the report."""

from __future__ import annotations

import json
from pathlib import Path
from typing import Any

import numpy as np

from bench.files import atomic_write_text
from bench.procedure.display import result_line
from bench.procedure.plan import Step
from bench.procedure.processing import build_summary
from bench.procedure.steps.context import RunContext
from bench.runstore import DONE, SKIPPED, file_stem


def fit(ctx: RunContext, step: Step) -> None:
    ctx.display.step("fitting models")
    from bench.exports import main_landmark, zero_bias_values
    from bench.procedure.lot_family import family_record
    from bench.verdicts import fit_record, kind_of, shown_landmarks

    early, ctx.early_fits = ctx.early_fits, None
    summary = build_summary(ctx.store, ctx.plan, early=early)
    ctx.summary = summary
    # The report's figures start now, drawn while the models and exports are written.
    _start_report(ctx)
    references = zero_bias_values(summary)
    models = ctx.store.root / "models"
    for sample in summary.samples:
        if sample.fit is not None:
            part = ctx.plan.part(sample.part)
            record = {**fit_record(sample, kind_of(part.spec)), **family_record(sample)}
            if sample.setups:
                record["setups"] = setups_json(sample.setups)
            text = json.dumps(record, indent=2, default=_plain)
            atomic_write_text(models / f"{file_stem(sample.label)}.fit.json", text + "\n")
            name, value = main_landmark(part.spec, sample)
            bead_point = name == "z_at_nominal_hz"
            ctx.display.result(
                result_line(
                    "fit " + sample.label,
                    part.spec.kind,
                    # The same values as summary.csv and the report: from the data where
                    # they hold, else the model's.
                    shown_landmarks(sample, kind_of(part.spec)),
                    nominal=part.spec.nominal,
                    tolerance=part.spec.tolerance,
                    bias_v=sample.bias_v,
                    reference=(
                        references.get((sample.part, sample.sample)) if sample.bias_v else None
                    ),
                    z_at_nominal=value if bead_point else None,
                    nominal_at_hz=part.spec.nominal_at_hz if bead_point else None,
                )
                + f"  [{sample.fit.model}, rms log error "
                f"{sample.fit.quality.rms_log_error:.3f}]"
            )
        else:
            ctx.display.result(f"fit {sample.label}: no model ({sample.fit_error})")
    from bench.plausibility import shared_screening

    shared = shared_screening(summary.samples)
    if shared is not None:  # also among the run's warnings in the report
        ctx.display.result("note: " + shared)
    # The AC drive across each part (class II ceramics depend on it), for the record.
    from bench.verdicts import sample_drive

    drives = {s.label: sample_drive(summary, s) for s in summary.samples}
    ctx.store.update("drive_v_rms_max", {k: v for k, v in drives.items() if v is not None})


def _start_report(ctx: RunContext) -> None:
    """When this session writes the report, start drawing its figures now on the worker
    processes: they draw while the fits' records and the exports are written (the report
    step finishes it; a run stopped before then cancels it)."""
    pending = [
        s
        for s in ctx.plan.steps
        if s.kind == "report" and ctx.store.step_state(s.id) not in (DONE, SKIPPED)
    ]
    if not pending or ctx.summary is None:
        return
    try:
        from bench.report import start_report
    except ImportError:
        return  # the report step says so
    ctx.report_draft = start_report(ctx.store.root, ctx.summary)


def export(ctx: RunContext, step: Step) -> None:
    ctx.display.step("writing exports")
    try:
        from bench.exports import write_exports
    except ImportError:
        ctx.store.mark(step.id, SKIPPED, message="exports are not available in this build")
        return
    root = ctx.store.root
    written = write_exports(root, ctx.need_summary())
    files = [str(Path(p).relative_to(root)) for paths in written.values() for p in paths]
    ctx.store.mark(step.id, DONE, files=files)


def report(ctx: RunContext, step: Step) -> None:
    ctx.display.step("writing the report")
    try:
        from bench.report import write_report
    except ImportError:
        ctx.store.mark(step.id, SKIPPED, message="the report is not available in this build")
        return
    draft, ctx.report_draft = ctx.report_draft, None
    path = write_report(ctx.store.root, ctx.need_summary(), draft=draft)
    relative = str(Path(path).relative_to(ctx.store.root))
    ctx.store.mark(step.id, DONE, files=[relative])
    ctx.store.update("report", relative)


def setups_json(setups: Any) -> list[dict[str, Any]]:
    """Each set-up of a stitched sample: its method, window (Ω) and points inside it."""
    out = []
    for label, data in setups:
        inside = np.asarray(data.inside_window, dtype=bool)
        f = np.asarray(data.f, dtype=float)
        out.append(
            {
                "method": label,
                "window": {"z_min": data.window.z_min, "z_max": data.window.z_max},
                "points_inside": int(np.count_nonzero(inside)),
                "f_inside_hz": [float(f[inside].min()), float(f[inside].max())]
                if inside.any()
                else None,
            }
        )
    return out


def _plain(value: Any) -> Any:
    if isinstance(value, (np.floating, np.integer)):
        return value.item()
    if isinstance(value, np.ndarray):
        return value.tolist()
    return str(value)
