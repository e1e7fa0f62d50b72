"""Fits on every core: results in input order, the same as one at a time, errors kept."""

from __future__ import annotations

import json
import os
import threading
from pathlib import Path

import numpy as np
import pytest

from bench.cli import main
from bench.parallel import available_cores, ordered_map, worker_count

EXAMPLES = Path(__file__).resolve().parents[2] / "examples"


def square_with_pid(x: int) -> tuple[int, int]:
    # Uneven work, so later items can finish before earlier ones.
    np.linalg.eigvals(np.random.default_rng(x).normal(size=(12 * (5 - x % 5), 12 * (5 - x % 5))))
    return x * x, os.getpid()


def fails_on_three(x: int) -> int:
    if x == 3:
        raise ValueError("three")
    return x


def test_worker_count_is_bounded_by_tasks_and_jobs():
    assert worker_count(None, 1) == 1
    assert worker_count(None, 100) == available_cores()
    assert worker_count(8, 3) == 3
    assert worker_count(1, 50) == 1


def test_results_come_in_input_order():
    out = list(ordered_map(square_with_pid, range(12), jobs=2))
    assert [value for value, _ in out] == [x * x for x in range(12)]


def test_one_job_runs_in_this_process():
    out = list(ordered_map(square_with_pid, range(3), jobs=1))
    assert {pid for _, pid in out} == {os.getpid()}


def test_a_worker_error_reaches_the_caller():
    with pytest.raises(ValueError, match="three"):
        list(ordered_map(fails_on_three, range(6), jobs=2))


def test_a_process_with_threads_still_maps_in_order():
    # A run on the simulated bench has server threads; its workers must not be forked
    # from it (that can deadlock), yet give the same results.
    stop = threading.Event()
    thread = threading.Thread(target=stop.wait, daemon=True)
    thread.start()
    try:
        out = list(ordered_map(square_with_pid, range(4), jobs=2))
    finally:
        stop.set()
        thread.join()
    assert [value for value, _ in out] == [0, 1, 4, 9]


@pytest.mark.skipif(not EXAMPLES.is_dir(), reason="the example measurements are not in this tree")
def test_fit_jobs_gives_the_serial_output_in_input_order(capsys, tmp_path):
    files = [
        EXAMPLES / "bead_600r.s1p",
        EXAMPLES / "mlcc_22u.s2p",
        tmp_path / "missing.s2p",
        EXAMPLES / "inductor_2u2.s2p",
    ]
    names = [str(f) for f in files]
    serial = main(["fit", *names, "--json", "--jobs", "1"])
    serial_out, serial_err = capsys.readouterr()
    parallel = main(["fit", *names, "--json", "--jobs", "3"])
    out, err = capsys.readouterr()
    assert serial == parallel == 2  # the missing file is bad input; the others fitted
    assert out == serial_out and err == serial_err
    records = [json.loads(line) for line in out.splitlines()]
    assert [r["file"] for r in records] == [names[0], names[1], names[3]]
    assert "missing.s2p: file not found" in err


def test_fit_refuses_zero_jobs(capsys):
    code = main(["fit", str(EXAMPLES / "mlcc_22u.s2p"), "--jobs", "0"])
    assert code == 2
    assert "--jobs" in capsys.readouterr().err


def scaled_sum(x: int, shared: np.ndarray) -> float:
    return float(x * shared.sum())


@pytest.mark.parametrize("threads", [False, True], ids=["forked", "from a server"])
def test_shared_reaches_every_call_on_every_start_method(threads):
    shared = np.arange(1000.0)
    stop = threading.Event()
    thread = threading.Thread(target=stop.wait, daemon=True)
    if threads:
        thread.start()
    try:
        out = list(ordered_map(scaled_sum, range(6), jobs=2, shared=shared))
    finally:
        stop.set()
        if threads:
            thread.join()
    serial = list(ordered_map(scaled_sum, range(6), jobs=1, shared=shared))
    assert out == serial == [x * shared.sum() for x in range(6)]


@pytest.mark.skipif(not EXAMPLES.is_dir(), reason="the example measurements are not in this tree")
def test_a_corrupt_file_among_good_ones_with_a_mount_loses_nothing(capsys, tmp_path):
    # The mount short is loaded once and shared by the workers; a file with text where a
    # number belongs is named with its line, and every other file is still fitted, in order.
    bad = tmp_path / "corrupt.s2p"
    lines = (EXAMPLES / "mlcc_22u.s2p").read_text().splitlines()
    row = next(i for i, line in enumerate(lines) if line.strip()[:1].isdigit()) + 3
    lines[row] = lines[row].replace(lines[row].split()[2], "n/a", 1)
    bad.write_text("\n".join(lines) + "\n")
    good = [EXAMPLES / "mlcc_22u.s2p", EXAMPLES / "bulk_330u.s2p"]
    names = [str(good[0]), str(bad), str(good[1])]
    mount = ["--mount", str(EXAMPLES / "mount_short.s2p")]
    serial = main(["fit", *names, *mount, "--json", "--jobs", "1"])
    serial_out, serial_err = capsys.readouterr()
    parallel = main(["fit", *names, *mount, "--json", "--jobs", "2"])
    out, err = capsys.readouterr()
    assert serial == parallel == 2
    assert out == serial_out and err == serial_err
    assert [json.loads(line)["file"] for line in out.splitlines()] == [names[0], names[2]]
    assert f"{bad}:{row + 1}" in err and "'n/a' is not a number" in err
    assert "1 of 3 files could not be fitted" in err
