"""Benchmark: the demo end to end, and the tool's own overhead per swept part.

Run on purpose, not by the test suite::

    .venv/bin/python benchmarks/bench_demo.py [--out DIR] [--time-scale 0.02]

1. The demo procedure, unattended, on the simulated bench with its sweep time compressed
   (as ``zbench demo`` runs it): wall time of the whole flow and of each phase
   (target: under 60 s on 2 cores).
2. The same measurements with the simulated time compressed to almost nothing, so what
   is left of each measure step is the tool's work: writing the raw sweep, the manifest,
   the correction and the live landmarks. Reported with and without the time spent in
   the analyser driver's sweep call (socket transfer and the simulator's own physics)
   (target: under 50 ms per swept part).
"""

from __future__ import annotations

import argparse
import statistics
import sys
import tempfile
import time
from pathlib import Path

REPO = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(REPO))

from bench.commands.demo import DEMO_TIME_SCALE, demo_procedure  # noqa: E402
from bench.commands.run import new_store, with_resources  # noqa: E402
from bench.procedure.display import PlainDisplay  # noqa: E402
from bench.procedure.instruments import open_instruments  # noqa: E402
from bench.procedure.operators import ScriptedOperator  # noqa: E402
from bench.procedure.plan import load_plan  # noqa: E402
from bench.procedure.runner import Runner  # noqa: E402
from simulated_instruments.server import start_bench  # noqa: E402


def run_demo(out: Path, time_scale: float, steps: tuple[str, ...] | None = None) -> Runner:
    """Run the demo procedure (optionally only some step kinds) and return the runner."""
    plan = load_plan(demo_procedure())
    if steps is not None:
        import dataclasses

        plan = dataclasses.replace(plan, steps=tuple(s for s in plan.steps if s.kind in steps))
    store = new_store(plan, demo_procedure(), out)
    with start_bench("demo", time_scale=time_scale, seed=1) as bench:
        plan = with_resources(plan, bench.resources)
        with open_instruments(plan, scripted=True) as instruments:
            runner = Runner(
                plan,
                store,
                instruments,
                ScriptedOperator(instruments.bench),
                PlainDisplay(),
                assume_yes=True,
            )
            runner.run()
    return runner


class InstrumentClock:
    """Time spent in instrument I/O (every transport call), per step, for the benchmark."""

    def __init__(self) -> None:
        from drivers.transport import VisaTransport

        self.total = 0.0
        for name in ("write", "query", "query_binary", "query_ascii_values"):
            original = getattr(VisaTransport, name)
            setattr(VisaTransport, name, self._timed(original))

    def _timed(self, original):
        def timed(*args, **kwargs):
            t0 = time.perf_counter()
            try:
                return original(*args, **kwargs)
            finally:
                self.total += time.perf_counter() - t0

        return timed


def phases(runner: Runner) -> dict[str, float]:
    totals: dict[str, float] = {}
    for step_id, seconds in runner.step_seconds.items():
        kind = step_id.split("/")[0]
        totals[kind] = totals.get(kind, 0.0) + seconds
    return totals


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--out", type=Path, default=None, help="folder for the run folders")
    parser.add_argument("--time-scale", type=float, default=DEMO_TIME_SCALE)
    args = parser.parse_args()
    out = args.out or Path(tempfile.mkdtemp(prefix="zbench-bench-"))

    t0 = time.perf_counter()
    runner = run_demo(out / "full", args.time_scale)
    total = time.perf_counter() - t0
    print(f"demo end to end (time scale {args.time_scale:g}): {total:.1f} s  (target < 60 s)")
    for kind, seconds in phases(runner).items():
        print(f"  {kind:<12} {seconds:7.2f} s")
    print(f"  sweeps {runner.sweeps_done}, inside the analyser driver {runner.sweep_seconds:.2f} s")

    # Overhead: everything but the instrument's time, per swept part. The simulated time
    # is compressed to almost nothing, and the time inside instrument I/O is measured.
    clock = InstrumentClock()
    io_per_step: dict[str, float] = {}
    original = Runner._execute

    def execute(self, step):
        before = clock.total
        try:
            original(self, step)
        finally:
            io_per_step[step.id] = clock.total - before

    Runner._execute = execute
    fast = run_demo(out / "overhead", 1e-6, steps=("calibrate", "mount_short", "measure"))
    Runner._execute = original
    # Biased steps also wait for ramps, settling and the discharge on purpose; leave them out.
    unbiased = [k for k in fast.step_seconds if k.startswith("measure/") and k.endswith("/0V")]
    whole = [fast.step_seconds[k] * 1e3 for k in unbiased]
    tool = [(fast.step_seconds[k] - io_per_step[k]) * 1e3 for k in unbiased]
    print(f"overhead per swept part, {len(unbiased)} unbiased parts, instrument time ~0:")
    print(
        f"  whole step (incl. socket I/O and the simulator): median "
        f"{statistics.median(whole):.1f} ms, max {max(whole):.1f} ms"
    )
    print(
        f"  tool only (step minus instrument I/O): median {statistics.median(tool):.1f} ms, "
        f"max {max(tool):.1f} ms  (target < 50 ms)"
    )
    print(f"run folders under {out}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
