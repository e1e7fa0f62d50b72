"""``zbench run PROCEDURE [--sim [SCENARIO]] [--resume RUNDIR] [--yes] ...`` (docs/design.md §3).

Guided by default (the procedure's mode), unattended with ``--yes``, a dry run against the
simulated bench with ``--sim``. The same runner does all three; only the operator and the
instruments' resources differ.
"""

from __future__ import annotations

import contextlib
import dataclasses
import errno
import shutil
import time
from collections.abc import Iterator
from pathlib import Path
from typing import Any

import click

from bench.errors import InputError
from bench.procedure.plan import Plan, load_plan, plan_from_text
from bench.runstore import RunStore

SIM_TIME_SCALE = 1.0


@contextlib.contextmanager
def simulated_bench(scenario: str, *, time_scale: float, seed: int | None = None) -> Iterator[Any]:
    """Start the simulated bench in this process on loopback ports; stop it afterwards."""
    from simulated_instruments.server import start_bench

    bench = start_bench(scenario, time_scale=time_scale, seed=seed)
    try:
        yield bench
    finally:
        bench.stop()


def with_resources(plan: Plan, resources: dict[str, str]) -> Plan:
    """``plan`` with the instruments' VISA resources replaced (e.g. by the simulator's)."""
    instruments = {
        role: dataclasses.replace(inst, resource=resources.get(role, inst.resource))
        for role, inst in plan.instruments.items()
    }
    return dataclasses.replace(plan, instruments=instruments)


def new_store(plan: Plan, procedure_path: Path, out: Path) -> RunStore:
    text = procedure_path.read_text(encoding="utf-8")
    try:
        return RunStore.create(
            out,
            plan_name=plan.name,
            resolved=plan.resolved,
            procedure_text=text,
            step_ids=[(s.id, s.kind) for s in plan.steps],
        )
    except OSError as exc:
        if exc.errno in (errno.ENOSPC, errno.EDQUOT):
            fix = "free space on that disk"
        elif exc.errno in (errno.EROFS, errno.EACCES, errno.EPERM):
            fix = "make the folder writable"
        else:
            raise
        raise InputError(
            f"cannot make the run folder: {exc.strerror or exc}",
            path=str(exc.filename or out),
            hint=f"{fix}, or give another folder with --out",
        ) from None


def resumed(run_dir: Path) -> tuple[RunStore, Plan]:
    """Reopen a run folder and rebuild its plan from the procedure stored in it."""
    store = RunStore.open(run_dir)
    source = store.manifest["procedure"].get("source", "procedure.yaml")
    plan = plan_from_text(store.procedure_text(), source)
    stored = [e["id"] for e in store.manifest["steps"]]
    if stored != [s.id for s in plan.steps]:
        raise InputError(
            "the run's steps do not match its stored procedure",
            path=str(run_dir / "manifest.json"),
            hint="the run folder was edited by hand; start a new run",
        )
    return store, plan


def check_plan_unchanged(store: RunStore, plan: Plan, *, accept_changed_plan: bool) -> None:
    """Refuse to resume with a plan other than the one the run started with (its digest in
    the manifest), unless ``accept_changed_plan``: then the manifest records the plan
    really used from here on, and the change."""
    from bench.runstore import changed_keys, now_iso, plan_digest

    run_dir = store.root
    digest = plan_digest(plan.resolved)
    started = store.manifest.get("plan_digest")
    if started is not None and started != digest:
        changes = changed_keys(store.manifest["procedure"], plan.resolved) or ["<plan>"]
        more = f" and {len(changes) - 6} more" if len(changes) > 6 else ""
        shown = ", ".join(changes[:6]) + more
        if not accept_changed_plan:
            raise InputError(
                f"the procedure in the run folder was changed after the run started ({shown})",
                path=str(Path(run_dir) / "procedure.yaml"),
                hint="put it back as it was and resume, start a new run, or resume with "
                "--accept-changed-plan to go on with the changed plan (the manifest records it)",
            )
        history = list(store.manifest.get("plan_changes", []))
        history.append({"time": now_iso(), "from": started, "to": digest, "changed": changes})
        store.update("plan_changes", history)
        store.update("procedure", plan.resolved)
        store.log(f"resumed with a changed plan ({shown}), accepted by --accept-changed-plan")
    if started != digest:
        store.update("plan_digest", digest)


def execute(
    plan: Plan,
    store: RunStore,
    *,
    sim: str | None,
    assume_yes: bool,
    time_scale: float = SIM_TIME_SCALE,
    seed: int | None = None,
    console: Any = None,
    quiet: bool = False,
    manual: bool = False,
) -> Any:
    """Run (or resume) ``plan`` into ``store``; returns the runner when it finished.

    ``manual`` (with ``sim``): a rehearsal, the simulated hands act only when the person
    at the console confirms each prompt (:class:`~bench.procedure.operators.RehearsalOperator`).
    """
    from bench.procedure.display import PlainDisplay, RichDisplay
    from bench.procedure.instruments import open_instruments
    from bench.procedure.operators import ConsoleOperator, RehearsalOperator, ScriptedOperator
    from bench.procedure.runner import Runner

    display = PlainDisplay(click.echo) if quiet else RichDisplay(console)
    guided = plan.mode == "guided" and not assume_yes
    say = display.message
    with contextlib.ExitStack() as stack:
        if sim is not None:
            # Recorded so that a resume goes back to the simulator, never to the
            # instruments the procedure names (a dry run's sweeps must not meet real ones).
            bench = stack.enter_context(simulated_bench(sim, time_scale=time_scale, seed=seed))
            # The seed really used (the scenario's own when none is given): a resume
            # starts the simulator with it again, so its noise continues the run's.
            store.update(
                "simulated",
                {
                    "scenario": sim,
                    "time_scale": time_scale,
                    "seed": bench.scenario.seed,
                    **({"manual": True} if manual else {}),
                },
            )
            plan = with_resources(plan, bench.resources)
        instruments = stack.enter_context(open_instruments(plan, scripted=sim is not None))
        person = ConsoleOperator(guided=guided, ask=_ask, say=say)
        if sim is not None and manual:
            # A rehearsal: the person answers every prompt; the simulated hands act only
            # on what was confirmed.
            hands = ScriptedOperator(
                instruments.bench, say=lambda text: say(f"  simulated hands: {text}")
            )
            operator: Any = RehearsalOperator(hands, guided=guided, ask=_ask, say=say)
        elif sim is not None:
            operator = ScriptedOperator(
                instruments.bench,
                guided=guided,
                decide=person.after_sweep if guided else None,
                acknowledge=person.caution if guided else None,
                say=say,
            )
        else:
            operator = person
        scale = time_scale if sim is not None else 1.0
        runner = Runner(
            plan,
            store,
            instruments,
            operator,
            display,
            assume_yes=assume_yes,
            # On the simulated bench zbench's own waits (ramp dwell, settle, discharge)
            # run on the bench's compressed clock, as the simulated part charges on it.
            sleep=(lambda seconds: time.sleep(seconds * scale)),
            time_scale=scale,
        )
        runner.run()
        return runner


def _is_procedure(text: str) -> bool:
    """Whether ``text`` names a procedure file (it has a ``sweep:``), not a scenario."""
    path = Path(text)
    if path.suffix not in (".yaml", ".yml") or not path.is_file():
        return False
    from drivers.safe_yaml import YamlRefusedError, load_text, read_text

    try:
        data = load_text(read_text(path))
    except (YamlRefusedError, OSError, UnicodeDecodeError):
        return False
    return isinstance(data, dict) and "sweep" in data and "parts" in data


def _ask(prompt: str) -> str:
    from bench.procedure.operators import OperatorStop

    try:
        return click.prompt(prompt, default="", show_default=False, prompt_suffix="")
    except click.exceptions.Abort:  # Ctrl-C or end of input at a prompt
        raise OperatorStop("stopped at a prompt") from None


def finished_text(store: RunStore) -> str:
    report = store.manifest.get("report")
    lines = [f"run folder: {store.root}"]
    if report:
        lines.append(f"report: {store.root / report}")
    return "\n".join(lines)


@click.command("run")
@click.argument("procedure", required=False, type=click.Path(path_type=Path))
@click.option(
    "--sim",
    "sim",
    is_flag=False,
    flag_value="demo",
    default=None,
    metavar="[SCENARIO]",
    help="Run against the simulated bench (scenario 'demo' if none is named).",
)
@click.option(
    "--out",
    type=click.Path(path_type=Path),
    default=Path("runs"),
    show_default=True,
    help="Folder in which the run folder is made.",
)
@click.option(
    "--resume",
    type=click.Path(path_type=Path),
    default=None,
    help="Continue a stopped run from its first incomplete step.",
)
@click.option(
    "--yes",
    "assume_yes",
    is_flag=True,
    help="Unattended: prompt only for what a switch cannot do; accept the cautions.",
)
@click.option(
    "--time-scale",
    type=click.FloatRange(min=0.0, min_open=True, max=1.0),
    default=None,
    help="With --sim: run the simulated instruments' time this much faster (0.01 = 100x).",
)
@click.option(
    "--seed",
    type=int,
    default=None,
    help="With --sim: the simulated bench's random seed (default: the scenario's own).",
)
@click.option(
    "--accept-changed-plan",
    is_flag=True,
    help="With --resume: go on although the run folder's procedure.yaml was changed.",
)
@click.option(
    "--manual",
    is_flag=True,
    help="With --sim: rehearse a real session; you answer every prompt and the simulated "
    "hands act only on what you confirm ('forget' at a prompt: they do nothing).",
)
@click.option("--quiet", is_flag=True, help="Plain lines instead of live progress.")
def command(
    procedure: Path | None,
    sim: str | None,
    out: Path,
    resume: Path | None,
    assume_yes: bool,
    time_scale: float | None,
    seed: int | None,
    accept_changed_plan: bool,
    manual: bool,
    quiet: bool,
) -> None:
    """Run PROCEDURE on the instruments it names, or against the simulator with --sim."""
    if procedure is None and resume is None and sim is not None and _is_procedure(sim):
        # "zbench run --sim demo.yaml": click gave the procedure to --sim as its scenario.
        procedure, sim = Path(sim), "demo"
    if resume is not None:
        if procedure is not None:
            raise InputError(
                "give either a procedure or --resume RUNDIR, not both",
                hint="a resumed run uses the procedure stored in its folder",
            )
        store, plan = resumed(resume)
        if store.manifest.get("state") == "complete":
            click.echo(
                f"the run in {store.root} is already complete: nothing to resume "
                "(zbench report rebuilds its report, zbench reprocess makes a new result set)"
            )
            click.echo(finished_text(store))
            return
        check_plan_unchanged(store, plan, accept_changed_plan=accept_changed_plan)
        simulated = store.manifest.get("simulated")
        if isinstance(simulated, dict) and seed is None and simulated.get("seed") is not None:
            seed = int(simulated["seed"])
        if sim is None and isinstance(simulated, dict):
            sim = str(simulated.get("scenario") or "demo")
            if time_scale is None:
                time_scale = float(simulated.get("time_scale") or SIM_TIME_SCALE)
            click.echo(f"the run was started on the simulated bench '{sim}'; resuming there")
    elif accept_changed_plan:
        raise InputError(
            "--accept-changed-plan goes with --resume RUNDIR",
            hint="a new run takes its procedure as it is",
        )
    elif procedure is None:
        raise InputError("no procedure given", hint="zbench run PROCEDURE.yaml [--sim]")
    else:
        plan = load_plan(procedure)
        store = new_store(plan, procedure, out)
    click.echo(f"run folder: {store.root}")
    scale = SIM_TIME_SCALE if time_scale is None else time_scale
    try:
        if seed is not None and sim is None:
            raise InputError("--seed goes with --sim", hint="real instruments have no seed")
        if manual and sim is None:
            raise InputError(
                "--manual goes with --sim",
                hint="on real instruments every prompt is already yours to answer",
            )
        execute(
            plan,
            store,
            sim=sim,
            assume_yes=assume_yes,
            time_scale=scale,
            seed=seed,
            quiet=quiet,
            manual=manual,
        )
    except BaseException:
        if resume is None and never_started(store):
            # Nothing was measured (unknown scenario, bad map, refused connection): no
            # folder is left behind to advise a resume.
            shutil.rmtree(store.root, ignore_errors=True)
            click.echo(f"nothing was measured; run folder {store.root} removed", err=True)
        raise
    click.echo(finished_text(store))


def never_started(store: RunStore) -> bool:
    """Whether a new run stored nothing: every step pending, no raw sweep written."""
    raw = store.root / "raw"
    if raw.is_dir() and any(raw.iterdir()):
        return False
    return all(entry.get("state") == "pending" for entry in store.manifest.get("steps", []))
