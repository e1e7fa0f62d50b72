"""``zbench reprocess RUNDIR``: recompute a run from its stored raw sweeps, with other settings.

Nothing touches an instrument: calibration, mount removal, window, fits, exports and the
report are all redone from ``raw/``. Every reprocess writes a new result set in
``RUNDIR/reprocess/<time>-<settings>/`` (its own ``summary.csv``, ``report.html``,
``models/``, ``corrected/``, ``plots/`` and ``settings.json``, which names the settings
and links the raw data); the run's own results and every earlier result set are kept.
The run's manifest lists the result sets under ``reprocessed``. Exit status 3 when any
fit missed its quality bound (or no model could be made), as ``zbench fit``.
"""

from __future__ import annotations

import dataclasses
import json
import os
import re
from pathlib import Path
from typing import Any

import click

from bench.commands.options import Fraction, Quantity
from bench.procedure.processing import build_summary, with_analysis
from bench.procedure.schema import MODEL_NAMES
from bench.runstore import RunStore, now_iso

#: Where the result sets of a run's reprocessing go, inside the run folder.
REPROCESS_FOLDER = "reprocess"


def stored_analysis(store: RunStore, plan: Any) -> tuple[Any, str | None]:
    """The analysis settings and model override of the run's own results.

    Older runs recorded an in-place reprocess under ``reprocess``; it is honoured.
    """
    last = store.manifest.get("reprocess", {})
    analysis = dataclasses.replace(plan.analysis, **last.get("analysis", {}))
    return analysis, last.get("model")


def write_outputs(root: Path, summary: Any) -> dict[str, Any]:
    """Fit JSON per sample, the exports and the report into ``root``; returns the paths."""
    from bench.exports import write_exports
    from bench.files import atomic_write_text
    from bench.procedure.lot_family import family_record
    from bench.report import write_report
    from bench.runstore import file_stem
    from bench.verdicts import fit_record, kind_of

    root = Path(root)
    for sample in summary.samples:
        if sample.fit is not None:
            kind = kind_of(summary.part(sample.part))
            record = {**fit_record(sample, kind), **family_record(sample)}
            text = json.dumps(record, indent=2, default=str)
            atomic_write_text(root / "models" / f"{file_stem(sample.label)}.fit.json", text)
    return {"exports": write_exports(root, summary), "report": write_report(root, summary)}


def settings_slug(changes: dict[str, Any]) -> str:
    """A short file-name tag of the settings changed: ``model-ladder_tolerance-5pct``."""
    parts = []
    for key, value in changes.items():
        if value is None:
            continue
        if key == "tolerance":
            text = f"{100 * value:g}pct"
        elif isinstance(value, float):
            text = f"{value:g}"
        else:
            text = str(value)
        parts.append(f"{key.replace('_db', '')}-{text}")
    slug = "_".join(parts) or "as-run"
    return re.sub(r"[^A-Za-z0-9._+\-]", "_", slug)[:80]


def new_result_folder(store: RunStore, slug: str) -> Path:
    """A fresh ``reprocess/<time>-<slug>`` folder (never an existing one)."""
    import datetime as dt

    stamp = dt.datetime.now(dt.timezone.utc).strftime("%Y%m%d-%H%M%S")
    base = store.root / REPROCESS_FOLDER
    base.mkdir(exist_ok=True)
    for n in range(1, 1000):
        name = f"{stamp}-{slug}" + (f"-{n}" if n > 1 else "")
        folder = base / name
        try:
            folder.mkdir()
        except FileExistsError:
            continue
        return folder
    raise click.ClickException(f"cannot make a new result folder in {base}")


def missed(summary: Any) -> list[str]:
    """Labels of the samples whose fit missed its bound or could not be made."""
    return [s.label for s in summary.samples if s.fit is None or not s.fit.meets_quality]


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
    type=Fraction(),
    default=None,
    help="Accuracy target of the measurable window: 0.1 or 10%.",
)
@click.option(
    "--noise-floor",
    type=Quantity("dB", "-110 or '-110 dB'"),
    default=None,
    help="Analyser noise floor, dB relative to the through.",
)
@click.option(
    "--trace-noise",
    type=Quantity("dB", "0.01 or '0.01 dB'"),
    default=None,
    help="Trace noise of S21, dB RMS.",
)
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
@click.pass_context
def command(
    ctx: click.Context,
    run_dir: Path,
    model: str | None,
    tolerance: float | None,
    noise_floor: float | None,
    trace_noise: float | None,
    mount: str | None,
    jobs: int | None,
) -> None:
    """Recompute RUN_DIR from its raw data into a new result set; earlier results stay."""
    from bench.commands.run import resumed

    store, plan = resumed(run_dir)
    changes = {
        "model": model,
        "tolerance": tolerance,
        "noise_floor_db": noise_floor,
        "trace_noise_db": trace_noise,
        "mount": mount,
    }
    analysis = with_analysis(
        plan,
        tolerance=tolerance,
        noise_floor_db=noise_floor,
        trace_noise_db=trace_noise,
        mount=mount,
    )
    summary = build_summary(store, plan, analysis=analysis, model_override=model, jobs=jobs)
    folder = new_result_folder(store, settings_slug(changes))
    raw_link = os.path.relpath(store.root / "raw", folder)
    used = {
        "model requested": model or "as the procedure states per part",
        "tolerance": analysis.tolerance,
        "noise_floor_db": analysis.noise_floor_db,
        "trace_noise_db": analysis.trace_noise_db,
        "mount": analysis.mount,
        "changed on the command line": ", ".join(k for k, v in changes.items() if v is not None)
        or "nothing",
        "raw data": raw_link,
        "time": now_iso(),
    }
    parts = summary.parts
    if model is not None:
        parts = tuple(dataclasses.replace(p, model=model) for p in parts)
    summary = dataclasses.replace(summary, parts=parts, setup={**summary.setup, "reprocess": used})
    record = {
        "run": os.path.relpath(store.root, folder),
        "raw": raw_link,
        "settings": {"analysis": dataclasses.asdict(analysis), "model": model},
        "time": used["time"],
    }
    from bench.files import atomic_write_text

    atomic_write_text(folder / "settings.json", json.dumps(record, indent=2, default=str))
    written = write_outputs(folder, summary)
    listed = list(store.manifest.get("reprocessed", []))
    listed.append({"folder": str(folder.relative_to(store.root)), **record["settings"]})
    store.update("reprocessed", listed)
    store.log(f"reprocessed into {folder.relative_to(store.root)} with {record['settings']}")

    count = len(summary.samples)
    bad = missed(summary)
    fitted = sum(1 for s in summary.samples if s.fit is not None)
    click.echo(
        f"reprocessed {count} sample{'s' if count != 1 else ''}: {fitted} fitted, "
        f"{len(bad)} missed the quality bound or could not be fitted; in {folder}"
    )
    click.echo(f"report: {written['report']}")
    if bad:
        shown = ", ".join(bad[:8]) + (f" and {len(bad) - 8} more" if len(bad) > 8 else "")
        click.echo(f"below the quality bound: {shown}", err=True)
        ctx.exit(3)
