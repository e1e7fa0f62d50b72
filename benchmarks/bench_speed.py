"""Speed benchmark: fits, start-up, batches, long sweeps and the demo, side by side.

Run on purpose, not by the test suite::

    .venv/bin/python benchmarks/bench_speed.py            # everything (a few minutes)
    .venv/bin/python benchmarks/bench_speed.py --quick    # fewer repeats, no demo
    .venv/bin/python benchmarks/bench_speed.py --only startup,points

Parts (targets in brackets):

1. ``fits``: one fit per family, named and ``auto``, at 801 and 1601 points (median
   CPU time, one thread; [median auto fit <= 20 ms at 801 points]).
2. ``startup``: ``zbench fit FILE`` on one file against ``python -c "import numpy,
   scipy.optimize"``, run alternately so the machine's load hits both alike; also
   ``zbench --help`` ([fit within 1.5 times the import]).
3. ``batch``: 20 generated measurements written as Touchstone files, fitted by
   ``zbench fit`` (one command, all cores, start-up and reading included) and by
   scikit-rf's VectorFitting in this process on the same impedances (fit only)
   ([zbench >= 5 times faster]).
4. ``points``: linear sweeps of 1e4, 1e5 and 1e6 points through the core (impedance
   chain and ``fit_impedance`` on arrays) and through ``zbench fit`` on a file, each in
   its own process, with its peak resident memory ([1e6 under 10 s and 1 GB]).
5. ``demo``: ``zbench demo`` end to end ([<= 10 s]).

The measurements are simulated as in ``bench_fit.py`` (invented parts richer than any
model, shunt-through with trace noise and a noise floor). Times are wall-clock: on a
shared machine they vary with the load, so compare figures of one run only.
"""

from __future__ import annotations

import os

# One BLAS thread in this process and the ones it starts: the fits are small, and
# threads spinning on a shared machine would slow VectorFitting and zbench alike.
for _name in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_name, "1")

import argparse  # noqa: E402
import statistics  # noqa: E402
import subprocess  # noqa: E402
import sys  # noqa: E402
import tempfile  # noqa: E402
import textwrap  # noqa: E402
import time  # noqa: E402
from pathlib import Path  # noqa: E402

import numpy as np  # noqa: E402

REPO = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(REPO))
sys.path.insert(0, str(REPO / "benchmarks"))

from bench_fit import F_START, F_STOP, PARTS, family_fits, measure, vf_fit  # noqa: E402

from bench.touchstone import write_touchstone_s  # noqa: E402

PYTHON = sys.executable
ZBENCH = str(Path(PYTHON).with_name("zbench"))
EXAMPLE = REPO / "examples" / "mlcc_22u.s2p"


# Commands run with bytecode caching on, as on a user's machine (an environment with
# PYTHONDONTWRITEBYTECODE would compile the whole package at every start).
ENV = {k: v for k, v in os.environ.items() if k != "PYTHONDONTWRITEBYTECODE"}


def run_timed(args, **kwargs) -> tuple[float, subprocess.CompletedProcess]:
    kwargs.setdefault("env", ENV)
    t = time.perf_counter()
    done = subprocess.run(args, capture_output=True, text=True, **kwargs)
    return time.perf_counter() - t, done


def fits(repeats: int) -> None:
    print(f"\n1. One fit per family (median CPU time of {repeats}; one thread, so on an idle")
    print("   machine the wall time; CPU time is less disturbed by other load)")
    print(f"{'family':<12}{'points':>7}{'model':>12}{'ms':>9}{'chosen':>16}")
    autos = {}
    for family, n, model, dt, res in family_fits(repeats, clock=time.process_time):
        if model == "auto":
            autos.setdefault(n, []).append(dt)
        chosen = f"{res.model}/{res.order}"
        print(f"{family:<12}{n:>7}{model:>12}{dt * 1e3:>9.1f}{chosen:>16}")
    for n, times in autos.items():
        print(f"median auto fit at {n} points: {statistics.median(times) * 1e3:.1f} ms")


def startup(repeats: int) -> None:
    print(f"\n2. Start-up (median wall time of {repeats}, run alternately)")
    # One run first writes the bytecode caches (see ENV).
    env = ENV
    run_timed([ZBENCH, "fit", str(EXAMPLE)], env=env)
    imports, fitted, helped = [], [], []
    for _ in range(repeats):
        imports.append(run_timed([PYTHON, "-c", "import numpy, scipy.optimize"], env=env)[0])
        dt, done = run_timed([ZBENCH, "fit", str(EXAMPLE)], env=env)
        assert done.returncode in (0, 3), done.stderr
        fitted.append(dt)
        helped.append(run_timed([ZBENCH, "--help"], env=env)[0])
    base = statistics.median(imports)
    fit = statistics.median(fitted)
    print(f"python -c 'import numpy, scipy.optimize': {base:.3f} s")
    print(f"zbench fit {EXAMPLE.name}:                {fit:.3f} s  ({fit / base:.2f} x the import)")
    print(f"zbench --help:                         {statistics.median(helped):.3f} s")


def batch(folder: Path) -> None:
    print("\n3. Batch of 20 files (801 points): zbench fit vs VectorFitting")
    from simulated_instruments.parts import DEFAULT_SPREAD, with_spread

    spread_key = {"two-branch": "mlcc", "ladder": "bulk", "inductor": "inductor", "bead": "bead"}
    f = np.geomspace(F_START, F_STOP, 801)
    rng = np.random.default_rng(2026)
    files, datasets = [], []
    for family, (part, series_r) in PARTS.items():
        for sample in range(5):
            truth = with_spread(part, rng, DEFAULT_SPREAD[spread_key[family]])
            data = measure(truth, f, 100 + sample, series_r)
            # The file holds the through-normalised S21 this impedance gives on the set-up.
            s21 = 2 * data.z / (2 * data.z + 50.0 + series_r)
            s = np.empty((f.size, 2, 2), dtype=complex)
            s[:, 0, 0] = s[:, 1, 1] = s21 - 1
            s[:, 0, 1] = s[:, 1, 0] = s21
            path = folder / f"{family}_{sample}.s2p"
            write_touchstone_s(
                path, f, s, comments=[f"port series resistors: {series_r:g} ohm each"]
            )
            files.append(str(path))
            datasets.append(data)
    zb, done = run_timed([ZBENCH, "fit", *files, "--json"])
    assert done.returncode in (0, 3), done.stderr
    # CPU time of the command and its workers (children's rusage), which other load on a
    # shared machine disturbs far less than wall time.
    before = children_cpu()
    serial, _ = run_timed([ZBENCH, "fit", *files, "--json", "--jobs", "1"])
    serial_cpu = children_cpu() - before
    t, c = time.perf_counter(), time.process_time()
    for data in datasets:
        use = data.inside_window
        vf_fit(data.f[use], data.z[use])
    vf, vf_cpu = time.perf_counter() - t, time.process_time() - c
    print(f"zbench fit, 20 files, all cores (start-up and reading included): {zb:.2f} s")
    print(
        f"zbench fit, 20 files, --jobs 1:                                   {serial:.2f} s"
        f" ({serial_cpu:.2f} s CPU)"
    )
    print(
        f"VectorFitting, 20 fits in this process (fit only):                {vf:.2f} s"
        f" ({vf_cpu:.2f} s CPU)"
    )
    print(f"zbench is {vf / zb:.1f} x faster (all cores), {vf / serial:.1f} x (one core)")
    print(f"in CPU time, one core: {vf_cpu / serial_cpu:.1f} x")


def children_cpu() -> float:
    import resource

    usage = resource.getrusage(resource.RUSAGE_CHILDREN)
    return usage.ru_utime + usage.ru_stime


CORE = textwrap.dedent(
    """
    import resource, sys, time
    import numpy as np
    t0 = time.perf_counter()
    from bench.core.conversions import shunt_through_s21
    from bench.core.fitting import fit_impedance
    from bench.core.impedance import impedance_from_shunt_through
    n = int(float(sys.argv[1]))
    f = np.linspace(1e3, 100e6, n)
    w = 2 * np.pi * f
    z = 4e-3 + 1j * w * 0.45e-9 + 1 / (1j * w * 10e-6)
    z = z + 1 / (1 / (0.05 + 1j * w * 2e-9) + 1j * w * 30e-9)
    rng = np.random.default_rng(1)
    noise = 1e-3 * rng.normal(size=n)
    s21 = shunt_through_s21(z, 50.0, 0.0) * (1 + noise) + 1e-6 * rng.normal(size=n)
    t1 = time.perf_counter()
    data = impedance_from_shunt_through(f, s21, noise_floor_db=-120.0, trace_noise_db=0.01)
    u, valid = data.rel_uncertainty, data.inside_window
    r = fit_impedance(data.f, data.z, rel_uncertainty=u, valid=valid)
    t2 = time.perf_counter()
    rss = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
    print(f"{t2 - t1:.2f} {rss:.0f} {r.model}/{r.order} {r.landmarks['srf']:.4g}")
    """
)

CLI = textwrap.dedent(
    """
    import resource, sys
    from bench.cli import main
    code = main(["fit", sys.argv[1]])
    rss = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
    print(f"exit {code} rss {rss:.0f}", file=sys.stderr)
    """
)


def write_linear_file(path: Path, n: int) -> None:
    f = np.linspace(1e3, 100e6, n)
    w = 2 * np.pi * f
    z = 4e-3 + 1j * w * 0.45e-9 + 1 / (1j * w * 10e-6)
    s21 = 2 * z / (2 * z + 50.0)
    s11 = s21 - 1
    cols = np.column_stack([f, s11.real, s11.imag, s21.real, s21.imag, s21.real, s21.imag])
    cols = np.column_stack([cols, s11.real, s11.imag])
    with path.open("w") as stream:
        stream.write("! invented 10 uF capacitor, linear sweep\n# Hz S RI R 50\n")
        np.savetxt(stream, cols, fmt="%.9g")


def points(folder: Path, sizes: tuple[int, ...]) -> None:
    print("\n4. Long linear sweeps, 1 kHz to 100 MHz (each in its own process)")
    head = f"{'points':>9}  {'core fit s':>10} {'peak MB':>8}  {'zbench fit s':>12} {'peak MB':>8}"
    print(head + "  outcome")
    env = {**ENV, "OPENBLAS_NUM_THREADS": "1"}
    for n in sizes:
        _, done = run_timed([PYTHON, "-c", CORE, str(n)], env=env, cwd=REPO, timeout=600)
        core = done.stdout.split() if done.returncode == 0 else ["failed", "-", done.stderr[-200:]]
        path = folder / f"linear_{n}.s2p"
        write_linear_file(path, n)
        dt, cli = run_timed([PYTHON, "-c", CLI, str(path)], env=env, cwd=REPO, timeout=600)
        tail = cli.stderr.strip().splitlines()
        rss = tail[-1].split()[-1] if tail else "?"
        outcome = "fitted" if "exit 0" in cli.stderr or "exit 3" in cli.stderr else "refused"
        if outcome == "refused":
            outcome += ": " + next(
                (line for line in tail if "holds" in line), tail[0] if tail else ""
            )
        print(f"{n:>9}  {core[0]:>10} {core[1]:>8}  {dt:>12.2f} {rss:>8}  {outcome}")
        path.unlink()


def demo(folder: Path) -> None:
    print("\n5. zbench demo end to end")
    dt, done = run_timed([ZBENCH, "demo", "--out", str(folder / "runs")], timeout=600)
    print(f"zbench demo: {dt:.1f} s (exit {done.returncode})")


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="fewer repeats, no demo")
    parser.add_argument("--only", default="fits,startup,batch,points,demo", help="parts to run")
    args = parser.parse_args()
    parts = set(args.only.split(","))
    if args.quick:
        parts.discard("demo")
    print(f"{os.cpu_count()} cores; load average {os.getloadavg()[0]:.1f}")
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp)
        if "fits" in parts:
            fits(3 if args.quick else 7)
        if "startup" in parts:
            startup(3 if args.quick else 7)
        if "batch" in parts:
            batch(folder)
        if "points" in parts:
            points(folder, (10_000, 100_000) if args.quick else (10_000, 100_000, 1_000_000))
        if "demo" in parts:
            demo(folder)
    print(f"load average at the end {os.getloadavg()[0]:.1f}")


if __name__ == "__main__":
    main()
