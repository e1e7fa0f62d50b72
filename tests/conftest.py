"""Shared fixtures: the simulated bench on free loopback ports, with compressed time.

``sim_bench`` is a running demo bench (seed 1, ``time_scale`` 0.001) stopped after the
test; ``sim_bench_factory(scenario=..., **kwargs)`` starts others (each stopped after the
test). Both give a :class:`simulated_instruments.server.RunningBench`: use its
``resources`` (VISA strings per instrument) with pyvisa-py. ``default_signals`` gives a
test Ctrl-C, SIGTERM and SIGHUP as a terminal session has them.
"""

from __future__ import annotations

import os
import signal
from collections.abc import Callable, Iterator
from typing import Any

import pytest

# One BLAS thread in the tests and the commands they start, as the command line sets
# for itself (bench/cli.py): before numpy loads, which the import below does. A fit's
# matrices are small; a second BLAS thread only spins on a core the suite could use.
for _name in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_name, "1")

from simulated_instruments.server import RunningBench, start_bench  # noqa: E402

SIM_TIME_SCALE = 0.001
SIM_SEED = 1


@pytest.fixture
def default_signals() -> Iterator[None]:
    """SIGINT, SIGTERM and SIGHUP at their defaults for the test (Python's Ctrl-C handler,
    the system's default for the others), the previous handlers restored afterwards. A
    test run started in the background by a script, or under nohup, inherits some of them
    ignored, which a run then keeps ignored (bench.stop_signals)."""
    defaults = {
        signal.SIGINT: signal.default_int_handler,
        signal.SIGTERM: signal.SIG_DFL,
        signal.SIGHUP: signal.SIG_DFL,
    }
    previous = {signum: signal.signal(signum, handler) for signum, handler in defaults.items()}
    try:
        yield
    finally:
        for signum, handler in previous.items():
            signal.signal(signum, handler if handler is not None else signal.SIG_DFL)


@pytest.fixture
def sim_bench_factory() -> Iterator[Callable[..., RunningBench]]:
    """Factory ``(scenario="demo", *, time_scale=0.001, seed=1, ports=None) -> RunningBench``."""
    benches: list[RunningBench] = []

    def start(scenario: Any = "demo", **kwargs: Any) -> RunningBench:
        kwargs.setdefault("time_scale", SIM_TIME_SCALE)
        kwargs.setdefault("seed", SIM_SEED)
        bench = start_bench(scenario, **kwargs)
        benches.append(bench)
        return bench

    yield start
    for bench in benches:
        bench.stop()


@pytest.fixture
def sim_bench(sim_bench_factory: Callable[..., RunningBench]) -> RunningBench:
    """The demo bench, running on OS-chosen loopback ports for one test."""
    return sim_bench_factory("demo")
