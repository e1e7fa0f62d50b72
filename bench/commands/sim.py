"""``zbench sim [SCENARIO] [--port N]``: serve the simulated bench until interrupted."""

from __future__ import annotations

import threading

import click


@click.command("sim")
@click.argument("scenario", required=False, default="demo")
@click.option(
    "--port",
    type=click.IntRange(0, 65532),
    default=0,
    show_default=True,
    help="First TCP port: analyzer on N, switch N+1, dc_source N+2, bench N+3, a gain-phase "
    "analyser (if the scenario has one) N+4 (0: OS-chosen).",
)
@click.option("--seed", type=int, default=None, help="Override the scenario's random seed.")
@click.option(
    "--time-scale",
    type=click.FloatRange(min=0, min_open=True),
    default=1.0,
    show_default=True,
    help="Multiply simulated durations (sweeps, settling) by this factor.",
)
def command(scenario: str, port: int, seed: int | None, time_scale: float) -> None:
    """Serve the simulated instruments of SCENARIO (a name or a YAML path) on 127.0.0.1
    and print their VISA resource strings; Ctrl-C (or a termination request, or closing
    the terminal) stops them."""
    from bench.stop_signals import stop_on_signals
    from simulated_instruments.server import start_bench

    try:
        bench = start_bench(scenario, ports=port, seed=seed, time_scale=time_scale)
    except OSError as exc:
        where = f"ports {port} to {port + 3}" if port else "OS-chosen ports"
        raise click.ClickException(
            f"cannot listen on 127.0.0.1 {where}: {exc.strerror or exc}; "
            "choose another --port, or 0 for OS-chosen ports"
        ) from exc
    stop = threading.Event()
    with stop_on_signals("the simulated bench is stopping"):
        try:
            click.echo(f"simulated bench '{bench.scenario.name}' on 127.0.0.1 (Ctrl-C to stop)")
            for name, resource in bench.resources.items():
                identity = bench.instruments[name].identity()
                click.echo(f"  {name:<10} {resource}  {identity}")
            click.echo(
                "Talk to them with any VISA client (pyvisa with pyvisa-py: "
                "ResourceManager('@py'));\n"
                "the bench port is the scripted operator's hands. 'zbench run PROCEDURE --sim'\n"
                "starts a simulated bench of its own."
            )
            while not stop.wait(0.5):
                pass
        except KeyboardInterrupt:  # Ctrl-C, SIGTERM or SIGHUP (bench.stop_signals)
            click.echo("stopping simulated bench", err=True)
        finally:
            bench.stop()
