"""``zbench demo [--out DIR]``: the demo procedure, unattended, on the simulated bench."""

from __future__ import annotations

from pathlib import Path

import click

from bench.commands.run import execute, finished_text, new_store
from bench.procedure.plan import load_plan

# The simulated analyser's sweep and settle times are compressed so the demo runs in
# well under a minute; the physics (noise, window, parts) is unchanged.
DEMO_TIME_SCALE = 0.02


def demo_procedure() -> Path:
    """The shipped demo procedure (``procedures/demo.yaml`` beside the package)."""
    return Path(__file__).resolve().parents[2] / "procedures" / "demo.yaml"


@click.command("demo")
@click.option(
    "--out",
    type=click.Path(path_type=Path),
    default=Path("runs"),
    show_default=True,
    help="Folder in which the run folder is made.",
)
@click.option("--quiet", is_flag=True, help="Plain lines instead of live progress.")
def command(out: Path, quiet: bool) -> None:
    """Start the simulated bench, run procedures/demo.yaml unattended, print the report path."""
    path = demo_procedure()
    plan = load_plan(path)
    store = new_store(plan, path, out)
    click.echo(f"run folder: {store.root}")
    execute(plan, store, sim="demo", assume_yes=True, time_scale=DEMO_TIME_SCALE, quiet=quiet)
    click.echo(finished_text(store))
