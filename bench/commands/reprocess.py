"""``zbench reprocess RUNDIR``: recompute a run from its stored raw sweeps, with other settings.

Nothing touches an instrument: calibration, mount removal, window, fits, exports and the
report are all redone from ``raw/``. The settings used are recorded in the manifest, so
``zbench report`` rebuilds the same report later.
"""

from __future__ import annotations

import dataclasses
import json
from pathlib import Path
from typing import Any

import click

from bench.procedure.processing import build_summary, with_analysis
from bench.procedure.schema import MODEL_NAMES
from bench.runstore import RunStore, now_iso


def stored_analysis(store: RunStore, plan: Any) -> tuple[Any, str | None]:
    """The analysis settings and model override last used on this run."""
    last = store.manifest.get("reprocess", {})
    analysis = dataclasses.replace(plan.analysis, **last.get("analysis", {}))
    return analysis, last.get("model")


def write_outputs(store: RunStore, summary: Any) -> dict[str, Any]:
    """Fit JSON per sample, the exports and the report; returns what was written."""
    from bench.files import atomic_write_text
    from bench.runstore import file_stem

    written: dict[str, Any] = {}
    for sample in summary.samples:
        if sample.fit is not None:
            text = json.dumps(sample.fit.to_json(), indent=2, default=str)
            atomic_write_text(store.root / "models" / f"{file_stem(sample.label)}.fit.json", text)
    try:
        from bench.exports import write_exports
    except ImportError:
        written["exports"] = None
    else:
        written["exports"] = write_exports(store.root, summary)
    try:
        from bench.report import write_report
    except ImportError:
        written["report"] = None
    else:
        path = write_report(store.root, summary)
        written["report"] = path
        store.update("report", str(Path(path).relative_to(store.root)))
    return written


@click.command("reprocess")
@click.argument("run_dir", type=click.Path(path_type=Path))
@click.option(
    "--model",
    type=click.Choice(MODEL_NAMES),
    default=None,
    help="Fit every sample with this model family instead of the procedure's.",
)
@click.option(
    "--tolerance",
    type=float,
    default=None,
    help="Accuracy target of the measurable window (fraction, e.g. 0.1).",
)
@click.option("--noise-floor", type=float, default=None, help="Analyser noise floor, dB.")
@click.option("--trace-noise", type=float, default=None, help="Trace noise of S21, dB.")
@click.option(
    "--mount",
    type=click.Choice(["measured", "fitted"]),
    default=None,
    help="Remove the measured mount short, or a fitted Rm + jωLm.",
)
@click.option(
    "--jobs",
    type=click.IntRange(min=1),
    default=None,
    metavar="N",
    help="Fit up to N samples at once, one process each (default: all cores).",
)
def command(
    run_dir: Path,
    model: str | None,
    tolerance: float | None,
    noise_floor: float | None,
    trace_noise: float | None,
    mount: str | None,
    jobs: int | None,
) -> None:
    """Recompute RUN_DIR from its raw data (calibration, window, fits, exports, report)."""
    from bench.commands.run import resumed

    store, plan = resumed(run_dir)
    if tolerance is not None and not 0 < tolerance < 1:
        raise click.BadParameter("must lie between 0 and 1", param_hint="--tolerance")
    analysis = with_analysis(
        plan,
        tolerance=tolerance,
        noise_floor_db=noise_floor,
        trace_noise_db=trace_noise,
        mount=mount,
    )
    summary = build_summary(store, plan, analysis=analysis, model_override=model, jobs=jobs)
    settings = {"analysis": dataclasses.asdict(analysis), "model": model, "time": now_iso()}
    store.update("reprocess", settings)
    store.log(f"reprocessed with {settings}")
    written = write_outputs(store, summary)
    fitted = sum(1 for s in summary.samples if s.fit is not None)
    count = len(summary.samples)
    click.echo(
        f"reprocessed {count} sample{'s' if count != 1 else ''}, {fitted} fitted, in {store.root}"
    )
    if written.get("report"):
        click.echo(f"report: {written['report']}")
