"""Benchmark: the time estimate of a run against the time the run took.

Run on purpose, not by the test suite::

    .venv/bin/python benchmarks/bench_estimate.py [--runs 3]

Runs the lean demo-like procedure of ``tests/end_to_end/test_estimate.py`` (three
samples on the switched fixture, fits, exports and the report, at the demo's compressed
clock) in fresh processes, as a user's run is, and prints each run's estimate beside
what it took, part by part, with the load average. A run this short is mostly fixed
costs (the workers' start, the first figure of each worker), which other load on the
machine moves by tens of percent: a timing, not a test.
"""

from __future__ import annotations

import argparse
import json
import os
import subprocess
import sys
import tempfile
from pathlib import Path

REPO = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(REPO / "tests" / "end_to_end"))

from test_estimate import DEMO_LIKE  # noqa: E402


def one_run(folder: Path) -> dict:
    procedure = folder / "demo-like.yaml"
    procedure.write_text(DEMO_LIKE, encoding="utf-8")
    args = ["run", str(procedure), "--sim", "--time-scale", "0.005", "--yes", "--quiet"]
    command = [sys.executable, "-m", "bench.cli", *args, "--out", str(folder / "runs")]
    subprocess.run(command, check=True, capture_output=True, cwd=REPO, timeout=300)
    (manifest,) = (folder / "runs").glob("*-demo-like/manifest.json")
    (timing,) = json.loads(manifest.read_text(encoding="utf-8"))["timing"]
    return timing


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--runs", type=int, default=3)
    runs = parser.parse_args().runs
    print(f"{'load':>5} {'part':<12}{'estimated s':>12}{'took s':>8}{'off':>8}")
    for _ in range(runs):
        load = os.getloadavg()[0]
        with tempfile.TemporaryDirectory() as tmp:
            timing = one_run(Path(tmp))
        est, took = timing["estimated"], timing["measured"]
        for part in ("instruments", "processing", "total"):
            off = est[part] / took[part] - 1 if took[part] else float("nan")
            print(f"{load:>5.1f} {part:<12}{est[part]:>12.2f}{took[part]:>8.2f}{off:>+8.0%}")


if __name__ == "__main__":
    main()
