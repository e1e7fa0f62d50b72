"""Hostile and careless YAML: every file zbench reads ends in a clear refusal, bounded.

Bounds are asserted on memory (tracemalloc's peak in-process; RLIMIT_AS and RLIMIT_CPU
on a ``zbench check`` subprocess), never on wall-clock time. Before the bounds, the alias
chain below ran for minutes growing memory by megabytes a second, and the deep ones ended
in RecursionError or a ConstructorError traceback.
"""

from __future__ import annotations

import os
import resource
import subprocess
import sys
import tracemalloc
from pathlib import Path

import pytest

from bench.errors import InputError, ProcedureError
from bench.procedure.loader import load_document
from drivers.command_map import load_command_map
from drivers.errors import CommandMapError
from drivers.safe_yaml import MAX_BYTES, YamlRefusedError, load_text
from simulated_instruments.scenario import load_scenario

# A 1.2 kB file: nine levels, each a list of nine aliases of the level below (9^9 values).
LAUGHS = 'a: &a ["lol","lol","lol","lol","lol","lol","lol","lol","lol"]\n' + "".join(
    f"{chr(98 + i)}: &{chr(98 + i)} [" + ",".join([f"*{chr(97 + i)}"] * 9) + "]\n" for i in range(8)
)

HOSTILE = {
    "alias chain": (LAUGHS, "expands to more than"),
    "self-referencing alias": ("name: x\na: &a [*a]\n", "refers to the node that contains it"),
    "5000 nested brackets": ("[" * 5000 + "]" * 5000, "nested more than"),
    "800 nested flow mappings": ("{a: " * 800 + "1" + "}" * 800, "nested more than"),
    "200 nested block mappings": (
        "".join(" " * i + f"k{i}:\n" for i in range(200)) + " " * 200 + "v\n",
        "nested more than",
    ),
    "python tag": ("name: !!python/name:os.system x\n", "tag !!python/name:os.system"),
    "python object tag": ("name: !!python/object/apply:os.system [ls]\n", "is not allowed"),
    "merge key": ("base: &b {start: 1 kHz}\nsweep:\n  <<: *b\n  stop: 1 MHz\n", "merge keys"),
    "20000-digit integer": ("points: " + "9" * 20000 + "\n", "cannot read"),
    "too large": ("# " + "x" * MAX_BYTES + "\n", "larger than"),
}
IDS = list(HOSTILE)
CASES = [HOSTILE[k] for k in IDS]


@pytest.mark.timeout(120)
@pytest.mark.parametrize(("text", "words"), CASES, ids=IDS)
def test_bounded_loader_refuses_with_a_message_in_bounded_memory(text, words):
    tracemalloc.start()
    try:
        with pytest.raises(YamlRefusedError, match=words) as info:
            load_text(text)
        peak = tracemalloc.get_traced_memory()[1]
    finally:
        tracemalloc.stop()
    # A few times the file's own size, never the expansion (9^9 values would be gigabytes).
    assert peak < 20e6
    assert info.value.hint
    # The message never quotes the file (a file read by mistake may be private).
    assert "lol" not in str(info.value) and "xxxx" not in str(info.value)


def test_plain_aliases_still_work():
    assert load_text("a: &x [1, 2]\nb: *x\n") == {"a": [1, 2], "b": [1, 2]}


@pytest.mark.parametrize(("text", "words"), CASES, ids=IDS)
def test_procedure_loader_names_the_file_and_line(tmp_path, text, words):
    path = tmp_path / "hostile.yaml"
    path.write_text(text, encoding="utf-8")
    with pytest.raises(ProcedureError, match=words) as info:
        load_document(path)
    assert str(info.value).startswith(str(path))
    assert info.value.exit_code == 2


@pytest.mark.parametrize(("text", "words"), CASES, ids=IDS)
def test_command_map_and_scenario_loaders_refuse_the_same(tmp_path, text, words):
    path = tmp_path / "hostile.yaml"
    path.write_text(text, encoding="utf-8")
    with pytest.raises(CommandMapError, match=words):
        load_command_map(path)
    with pytest.raises(InputError, match=words):
        load_scenario(path)


def test_a_fifo_is_refused_without_waiting_for_a_writer(tmp_path):
    fifo = tmp_path / "procedure.yaml"
    os.mkfifo(fifo)
    with pytest.raises(ProcedureError, match="not a regular file"):
        load_document(fifo)
    with pytest.raises(CommandMapError, match="not a regular file"):
        load_command_map(fifo)


def _limits() -> None:  # pragma: no cover - runs in the child
    # 1 GiB of address space and 60 s of CPU: a runaway expansion would hit either.
    resource.setrlimit(resource.RLIMIT_AS, (1 << 30, 1 << 30))
    resource.setrlimit(resource.RLIMIT_CPU, (60, 60))


@pytest.mark.timeout(300)
@pytest.mark.parametrize(
    "case", ["alias chain", "self-referencing alias", "5000 nested brackets", "merge key"]
)
def test_zbench_check_exits_2_under_memory_and_cpu_limits(tmp_path, case):
    text, words = HOSTILE[case]
    path = tmp_path / "hostile.yaml"
    path.write_text(text, encoding="utf-8")
    done = subprocess.run(
        [sys.executable, "-m", "bench.cli", "check", str(path)],
        capture_output=True,
        text=True,
        preexec_fn=_limits,
        cwd=Path(__file__).resolve().parents[2],
        check=False,
    )
    assert done.returncode == 2, done.stderr
    assert words in done.stderr and str(path) in done.stderr
    assert "Traceback" not in done.stderr
