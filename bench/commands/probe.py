"""``zbench probe RESOURCE --map FILE [--sweep] [--draft OUT]``: check a command map
against a live instrument, entry by entry, with queries only (anything it has to set is
read first and put back). Exit 0 when every entry works, 2 when one fails."""

from __future__ import annotations

from pathlib import Path

import click

STATUS = {"ok": "ok  ", "fail": "FAIL", "info": "info"}


@click.command("probe")
@click.argument("resource")
@click.option(
    "--map",
    "map_name",
    required=True,
    help="Command map to check: a shipped name (default, meas_stim, gain_phase) or a file.",
)
@click.option("--sweep", is_flag=True, help="Also run one short sweep (11 points) and read it.")
@click.option(
    "--draft",
    type=click.Path(dir_okay=False, path_type=Path),
    default=None,
    help="Write a map skeleton from what the instrument answered to this file.",
)
@click.option(
    "--timeout",
    type=click.FloatRange(min=0.05),
    default=2.0,
    show_default=True,
    help="Seconds to wait for each answer (an unknown query is never answered).",
)
@click.option(
    "--backend",
    default="@py",
    show_default=True,
    help="VISA library: @py (pyvisa-py) or '' for an installed VISA.",
)
def command(
    resource: str, map_name: str, sweep: bool, draft: Path | None, timeout: float, backend: str
) -> None:
    """Check each entry of a command map against the instrument at RESOURCE."""
    import yaml

    from drivers.command_map import load_command_map
    from drivers.probe import draft_map, probe
    from drivers.transport import VisaTransport

    cmap = load_command_map(map_name)
    click.echo(f"probing {resource} with command map {cmap.name!r} ({cmap.path})")
    with VisaTransport.open(resource, backend=backend, timeout_s=timeout) as link:
        report = probe(link, cmap, sweep=sweep, progress=lambda s: click.echo(f"-- {s}"))
    for check in report.checks:
        click.echo(f"{STATUS[check.status]}  {check.key}: {check.detail}")
    failed = report.failed
    if draft is not None:
        from drivers.safe_yaml import load_text, read_text

        raw = load_text(read_text(cmap.path))  # already validated by load_command_map
        header = [
            f"# Draft command map written by zbench probe from {resource}.",
            f"# Identity: {report.identity or '(none)'}",
        ]
        header += [f"# FAILED {c.key}: {c.detail}" for c in failed]
        header.append("# Edit what failed, then run zbench probe on this file again.")
        text = "\n".join(header) + "\n" + yaml.safe_dump(draft_map(raw, report), sort_keys=False)
        from bench.files import atomic_write_text

        atomic_write_text(draft, text)
        click.echo(f"draft map: {draft}")
    if failed:
        click.echo(
            f"{len(failed)} of {len(report.checks)} entries failed: fix them in the map "
            "(the instrument's manual names its commands)",
            err=True,
        )
        raise click.exceptions.Exit(2)
    click.echo(f"all {len(report.checks)} entries work")
