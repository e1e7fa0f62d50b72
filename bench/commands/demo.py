"""``zbench demo [--out DIR] [--dialect NAME]``: the demo procedure, unattended, on the
simulated bench; ``--dialect`` picks the command dialect the simulated analyser speaks
(and the procedure's command map with it)."""

from __future__ import annotations

from pathlib import Path

import click

from bench.commands.run import execute, finished_text, new_store
from bench.procedure.plan import load_plan, plan_from_text
from bench.runstore import RunStore

# The simulated analyser's sweep and settle times are compressed so the demo runs in
# well under a minute; the physics (noise, window, parts) is unchanged.
DEMO_TIME_SCALE = 0.005

# Analyser dialect -> the simulated scenario that speaks it (command map of the same name).
DEMO_SCENARIOS = {"default": "demo", "meas_stim": "demo_meas_stim"}


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
@click.option(
    "--dialect",
    type=click.Choice(sorted(DEMO_SCENARIOS)),
    default="default",
    show_default=True,
    help="Command dialect of the simulated analyser (and the command map the run uses).",
)
@click.option(
    "--seed",
    type=int,
    default=None,
    help="The simulated bench's random seed (default: the scenario's own); kept in the manifest.",
)
def command(out: Path, quiet: bool, dialect: str, seed: int | None) -> None:
    """Start the simulated bench, run procedures/demo.yaml unattended, print the report path."""
    path = demo_procedure()
    if dialect == "default":
        plan = load_plan(path)
        store = new_store(plan, path, out)
    else:
        text = demo_text_for(dialect, path)
        plan = plan_from_text(text, str(path))
        store = RunStore.create(
            out,
            plan_name=plan.name,
            resolved=plan.resolved,
            procedure_text=text,
            step_ids=[(s.id, s.kind) for s in plan.steps],
        )
    click.echo(f"run folder: {store.root}")
    execute(
        plan,
        store,
        sim=DEMO_SCENARIOS[dialect],
        assume_yes=True,
        time_scale=DEMO_TIME_SCALE,
        seed=seed,
        quiet=quiet,
    )
    click.echo(finished_text(store))


def demo_text_for(dialect: str, path: Path) -> str:
    """The demo procedure's text with the analyser's command map set to ``dialect``
    (stored as the run's procedure, so a resume uses the same map)."""
    text = path.read_text(encoding="utf-8")
    before = "command_map: default"
    if text.count(before) != 1:
        raise click.ClickException(
            f"{path}: expected one '{before}' to switch to {dialect!r}; "
            "restore the demo procedure's analyser line"
        )
    return text.replace(before, f"command_map: {dialect}")
