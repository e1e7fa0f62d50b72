"""The ``zbench`` command line (contract: docs/design.md §3).

Each sub-command lives in its own module under :mod:`bench.commands` and is imported
only when called, so ``zbench fit`` does not pay for the simulator or the drivers.
Errors a user can cause become a clear message and an exit code, never a traceback.
"""

from __future__ import annotations

import importlib
import os
import sys

# One BLAS thread unless the user says otherwise, set before numpy loads: a fit's
# matrices are small, so BLAS threads only spin (on a busy machine they cost several
# times the fit's own work), and zbench uses the other cores through worker processes
# (bench/parallel.py), which inherit this.
for _name in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_name, "1")

import click  # noqa: E402

from bench import __version__  # noqa: E402
from bench.errors import ZbenchError  # noqa: E402

# name -> (module under bench.commands, one-line help)
COMMANDS: dict[str, tuple[str, str]] = {
    "demo": ("demo", "Run the demo procedure unattended against the simulated bench."),
    "run": ("run", "Run a procedure on instruments, or against the simulator with --sim."),
    "sim": ("sim", "Serve the simulated instruments on 127.0.0.1 until stopped."),
    "fit": ("fit", "Fit equivalent-circuit models to stored measurements."),
    "window": ("window", "Print the measurable impedance window of a set-up."),
    "check": ("check", "Validate a procedure and print its plan."),
    "reprocess": ("reprocess", "Recompute a run from its stored raw data."),
    "report": ("report", "Rebuild the report of a run."),
    "probe": ("probe", "Check a command map against a live instrument, entry by entry."),
}


class LazyGroup(click.Group):
    """A group whose sub-commands are imported on first use."""

    def list_commands(self, ctx: click.Context) -> list[str]:
        return list(COMMANDS)

    def format_commands(self, ctx: click.Context, formatter: click.HelpFormatter) -> None:
        """The command list of ``zbench --help``, from the table: nothing is imported."""
        rows = [(name, help_text) for name, (_, help_text) in COMMANDS.items()]
        with formatter.section("Commands"):
            formatter.write_dl(rows)

    def get_command(self, ctx: click.Context, cmd_name: str) -> click.Command | None:
        if cmd_name not in COMMANDS:
            return None
        module_name, help_text = COMMANDS[cmd_name]
        try:
            module = importlib.import_module(f"bench.commands.{module_name}")
        except ModuleNotFoundError as exc:
            if exc.name != f"bench.commands.{module_name}":
                raise

            @click.command(cmd_name, help=f"{help_text} (not available in this build)")
            def unavailable() -> None:
                raise click.ClickException(f"'zbench {cmd_name}' is not available in this build")

            return unavailable
        command = module.command
        if command.help is None:
            command.help = help_text
        return command


@click.group(cls=LazyGroup, context_settings={"help_option_names": ["-h", "--help"]})
@click.version_option(__version__, prog_name="zbench")
def cli() -> None:
    """zbench: shunt-through impedance measurement and equivalent-circuit models."""


def _driver_error_types() -> tuple[type[BaseException], ...]:
    try:
        from drivers.errors import DriverError
    except ImportError:  # drivers not importable: nothing to catch
        return ()
    return (DriverError,)


def main(argv: list[str] | None = None) -> int:
    """Entry point of the console script; returns the process exit code."""
    driver_errors = _driver_error_types()
    try:
        result = cli.main(args=argv, prog_name="zbench", standalone_mode=False)
    except click.exceptions.Exit as exc:
        return int(exc.exit_code)
    except click.ClickException as exc:
        exc.show()
        return 2
    except click.exceptions.Abort:
        click.echo("zbench: stopped.", err=True)
        return 130
    except ZbenchError as exc:
        click.echo(f"zbench: {exc}", err=True)
        return exc.exit_code
    except driver_errors as exc:
        click.echo(f"zbench: instrument: {exc}", err=True)
        return 1
    except KeyboardInterrupt:
        click.echo("zbench: interrupted.", err=True)
        return 130
    # With standalone_mode off, click returns a command's ctx.exit(code) as the result.
    return result if isinstance(result, int) else 0


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
