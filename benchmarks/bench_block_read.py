"""Benchmark: read a 1601-point REAL,64 trace from the simulated analyser via pyvisa-py.

Run on purpose, not by the test suite::

    .venv/bin/python benchmarks/bench_block_read.py [--reads 500] [--target-ms 2.0]

Starts the demo bench on loopback, takes one 1601-point sweep, then times
``TRACe:DATA? S21`` read with ``query_binary_values`` (25 632-byte block, header
``#525632``) the way a driver reads it. Prints the median and percentiles; exits 1 when
the median is above the target (2 ms by default).
"""

from __future__ import annotations

import argparse
import statistics
import sys
import time

import numpy as np
import pyvisa

from simulated_instruments.server import start_bench

POINTS = 1601


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--reads", type=int, default=500, help="timed reads (default 500)")
    parser.add_argument("--target-ms", type=float, default=2.0, help="median target (ms)")
    args = parser.parse_args(argv)

    with start_bench("demo", time_scale=0.001, seed=1) as bench:
        rm = pyvisa.ResourceManager("@py")
        vna = rm.open_resource(
            bench.resources["analyzer"],
            read_termination="\n",
            write_termination="\n",
            timeout=5000,
        )
        vna.write(f"SENS:SWE:POIN {POINTS};:FORM:DATA REAL,64;:FORM:BORD NORM;:INIT")
        assert vna.query("*OPC?") == "1"

        def read() -> np.ndarray:
            return vna.query_binary_values(
                "TRAC:DATA? S21", datatype="d", is_big_endian=True, container=np.array
            )

        for _ in range(20):  # warm up sockets, caches and the interpreter
            data = read()
        assert data.shape == (2 * POINTS,), data.shape
        times = []
        for _ in range(args.reads):
            t0 = time.perf_counter()
            read()
            times.append((time.perf_counter() - t0) * 1e3)
        vna.close()
        rm.close()

    times.sort()
    median = statistics.median(times)
    p90 = times[int(0.9 * (len(times) - 1))]
    print(
        f"{POINTS}-point REAL,64 trace via pyvisa-py: median {median:.3f} ms, "
        f"p10 {times[len(times) // 10]:.3f} ms, p90 {p90:.3f} ms, max {times[-1]:.3f} ms "
        f"over {len(times)} reads (target median < {args.target_ms:g} ms)"
    )
    return 0 if median < args.target_ms else 1


if __name__ == "__main__":
    sys.exit(main())
