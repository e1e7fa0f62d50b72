"""``zbench report RUNDIR``: rebuild a run's report (and exports) from its stored data."""

from __future__ import annotations

from pathlib import Path

import click

from bench.errors import InputError


@click.command("report")
@click.argument("run_dir", type=click.Path(path_type=Path))
def command(run_dir: Path) -> None:
    """Rebuild RUN_DIR's report.html from its raw data, with the settings last used."""
    from bench.commands.reprocess import stored_analysis
    from bench.commands.run import resumed
    from bench.procedure.processing import build_summary

    store, plan = resumed(run_dir)
    analysis, model = stored_analysis(store, plan)
    summary = build_summary(store, plan, analysis=analysis, model_override=model)
    if not summary.samples:
        raise InputError(
            "the run has no measured sample yet",
            path=str(run_dir),
            hint="finish it first with zbench run --resume RUNDIR",
        )
    try:
        from bench.report import write_report
    except ImportError:
        raise InputError("the report is not available in this build") from None
    path = write_report(store.root, summary)
    store.update("report", str(Path(path).relative_to(store.root)))
    click.echo(f"report: {path}")
