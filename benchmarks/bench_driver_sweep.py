"""Benchmark: one full four-parameter sweep through the drivers, against the simulator.

Run on purpose, not by the test suite::

    .venv/bin/python benchmarks/bench_driver_sweep.py [--points 1601 20001] [--sweeps 10]

For each point count: configures the demo analyser through :class:`NetworkAnalyzer`,
then times ``sweep()`` (SWEep:TIME?, INITiate, *OPC?, error drain, frequency list and
four REAL,64 traces). Simulated sweep time is compressed (``time_scale`` 1e-6), so the
figure is the drivers' and the link's cost, plus the simulator's physics.
"""

from __future__ import annotations

import argparse
import statistics
import time

from drivers.analyzer import NetworkAnalyzer, SweepPlan
from drivers.bench_control import BenchControl
from drivers.transport import VisaTransport
from simulated_instruments.server import start_bench


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--points", type=int, nargs="+", default=[201, 1601, 20001])
    parser.add_argument("--sweeps", type=int, default=10, help="timed sweeps per size")
    args = parser.parse_args(argv)

    with (
        start_bench("demo", time_scale=1e-6, seed=1) as sim,
        VisaTransport.open(sim.resources["analyzer"], timeout_s=30.0) as link,
        VisaTransport.open(sim.resources["bench"]) as bench_link,
    ):
        BenchControl(bench_link).connect_through()
        vna = NetworkAnalyzer(link)
        print(f"{'points':>7} {'median ms':>10} {'min ms':>8} {'points/s':>10}")
        for points in args.points:
            vna.configure(SweepPlan(100.0, 100e6, points, "log", 1e3, 0.0))
            vna.sweep()  # warm-up
            times = []
            for _ in range(args.sweeps):
                t0 = time.perf_counter()
                vna.sweep()
                times.append(time.perf_counter() - t0)
            median = statistics.median(times)
            print(f"{points:>7} {median * 1e3:>10.2f} {min(times) * 1e3:>8.2f} "
                  f"{points / median:>10.0f}")  # fmt: skip
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
