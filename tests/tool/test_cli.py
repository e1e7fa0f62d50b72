"""The command-line entry point: exit codes and messages (contract: docs/design.md §3)."""

import click

from bench import __version__, cli
from bench.errors import FitError, InputError


def test_every_documented_command_is_listed(capsys):
    assert cli.main(["--help"]) == 0
    out = capsys.readouterr().out
    for name in ("demo", "run", "sim", "fit", "window", "check", "reprocess", "report"):
        assert name in out


def test_version(capsys):
    assert cli.main(["--version"]) == 0
    assert __version__ in capsys.readouterr().out


def test_unknown_command_is_a_usage_error(capsys):
    assert cli.main(["frobnicate"]) == 2
    assert "No such command" in capsys.readouterr().err


def _register(monkeypatch, name, command):
    monkeypatch.setitem(cli.COMMANDS, name, ("_test", "test command"))
    monkeypatch.setattr(cli.LazyGroup, "get_command", lambda self, ctx, n: command)


def test_input_error_gives_exit_2_and_no_traceback(monkeypatch, capsys):
    @click.command("boom")
    def boom():
        raise InputError("frequencies are not increasing", path="a.s2p", hint="sort the file")

    _register(monkeypatch, "boom", boom)
    assert cli.main(["boom"]) == 2
    err = capsys.readouterr().err
    assert "a.s2p: frequencies are not increasing" in err
    assert "fix: sort the file" in err
    assert "Traceback" not in err


def test_fit_error_gives_exit_3(monkeypatch, capsys):
    @click.command("boom")
    def boom():
        raise FitError("rms log error 0.4 above its bound 0.1")

    _register(monkeypatch, "boom", boom)
    assert cli.main(["boom"]) == 3


def test_ctx_exit_code_is_kept(monkeypatch):
    @click.command("boom")
    @click.pass_context
    def boom(ctx):
        ctx.exit(3)

    _register(monkeypatch, "boom", boom)
    assert cli.main(["boom"]) == 3
