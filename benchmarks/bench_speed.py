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
3. ``batch``: 20 generated measurements written as Touchstone files, fitted side by side,
   alternately, in two ways: (a) the batch's work like for like, in this process with
   the imports done and reading included on both sides: zbench's batch
   (``bench.batch.fit_files``, the code ``zbench fit FILE...`` runs after start-up: read,
   fit on every core through ``bench.parallel.ordered_map``, outcomes in order; and on
   one process) against VectorFitting reading each file with scikit-rf and fitting its Z
   ([zbench >= 5 times faster], judged here); (b) the commands end to end, start-up
   included on both sides: ``zbench fit FILE... --json`` against a Python script that
   imports scikit-rf, reads the files and runs VectorFitting (:data:`VF_BATCH`).
   VectorFitting's configuration is ``bench_fit.py``'s: 3 real and 3 complex pole pairs,
   log-spaced starting poles, constant and proportional terms.
4. ``points``: linear sweeps of 1e4, 1e5 and 1e6 points through the core (impedance
   chain and ``fit_impedance`` on arrays) and through ``zbench fit`` on a file, each in
   its own process, with its peak resident memory ([1e6 under 10 s and 1 GB]).
5. ``demo``: ``zbench demo`` end to end ([<= 10 s]).

The measurements are simulated as in ``bench_fit.py`` (invented parts richer than any
model, shunt-through with trace noise and a noise floor). Times are wall-clock, with CPU
time beside them where it helps (CPU time of worker processes included): on a shared
machine wall times vary with the load, so compare figures of one run only.
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

from bench_fit import F_START, F_STOP, PARTS, VF_OPTIONS, family_fits, measure  # noqa: E402

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


def fits(repeats: int, op_time: float) -> None:
    print(f"\n1. One fit per family (median and shortest CPU time of {repeats}; one thread, so")
    print("   on an idle machine the wall time; CPU time is less disturbed by other load, the")
    print("   shortest least of all; 'ops': the shortest in numpy operations of the yardstick)")
    print(f"{'family':<12}{'points':>7}{'model':>12}{'ms':>9}{'best':>8}{'ops':>8}{'chosen':>16}")
    autos: dict[int, list[tuple[float, float]]] = {}
    for family, n, model, dt, best, res in family_fits(repeats, clock=time.process_time):
        if model == "auto":
            autos.setdefault(n, []).append((dt, best))
        chosen = f"{res.model}/{res.order}"
        print(
            f"{family:<12}{n:>7}{model:>12}{dt * 1e3:>9.1f}{best * 1e3:>8.1f}"
            f"{best / op_time:>8.0f}{chosen:>16}"
        )
    for n, times in autos.items():
        median = statistics.median(t[0] for t in times)
        shortest = statistics.median(t[1] for t in times)
        print(
            f"median auto fit at {n} points: {median * 1e3:.1f} ms (of the shortest times: "
            f"{shortest * 1e3:.1f} ms, {shortest / op_time:.0f} numpy operations)"
        )


def startup(repeats: int) -> None:
    print(f"\n2. Start-up (median wall time of {repeats}, run alternately)")
    # One run first writes the bytecode caches (see ENV).
    env = ENV
    run_timed([ZBENCH, "fit", str(EXAMPLE)], env=env)
    imports, numpy_only, fitted, helped = [], [], [], []
    for _ in range(repeats):
        imports.append(run_timed([PYTHON, "-c", "import numpy, scipy.optimize"], env=env)[0])
        dt, done = run_timed([ZBENCH, "fit", str(EXAMPLE)], env=env)
        assert done.returncode in (0, 3), done.stderr
        fitted.append(dt)
        helped.append(run_timed([ZBENCH, "--help"], env=env)[0])
        numpy_only.append(run_timed([PYTHON, "-c", "import numpy"], env=env)[0])
    base = statistics.median(imports)
    fit = statistics.median(fitted)
    print(f"load average {os.getloadavg()[0]:.1f}")
    print(f"python -c 'import numpy, scipy.optimize': {base:.3f} s")
    print(f"python -c 'import numpy':                 {statistics.median(numpy_only):.3f} s")
    print(f"zbench fit {EXAMPLE.name}:                {fit:.3f} s  ({fit / base:.2f} x the import)")
    print(f"zbench --help:                         {statistics.median(helped):.3f} s")


#: scikit-rf's VectorFitting on stored files, as its user would run it: each file read
#: by scikit-rf, the shunt-through S21 turned into Z with the port series resistors the
#: file's comments state, and fitted with the configuration of ``bench_fit.vf_fit``
#: (3 real and 3 complex pole pairs, log-spaced start, constant and proportional terms)
#: on every point of the file. Executed in this process for part (a) and as a script of
#: its own, with its imports, for part (b).
VF_BATCH = f"VF_OPTIONS = {VF_OPTIONS!r}\n" + textwrap.dedent(
    """
    import re, sys, warnings
    import numpy as np
    import skrf as rf
    from skrf.vectorFitting import VectorFitting

    def vf_files(paths):
        poles = []
        for path in paths:
            net = rf.Network(path)
            stated = re.search(r"port series resistors: ([0-9.eE+-]+) ohm", net.comments or "")
            rs = float(stated.group(1)) if stated else 0.0
            s21 = net.s[:, 1, 0]
            z = (50.0 + rs) * s21 / (2 * (1 - s21))
            s11 = rf.network.z2s(z.reshape(-1, 1, 1), 50.0)
            vf = VectorFitting(rf.Network(frequency=net.frequency, s=s11, z0=50.0))
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                vf.vector_fit(**VF_OPTIONS)
            poles.append(vf.poles)
        return poles

    if __name__ == "__main__":
        print(len(vf_files(sys.argv[1:])), "files fitted")
    """
)


def write_batch_files(folder: Path) -> list[str]:
    """20 generated measurements (5 samples with lot spread of each of 4 parts, 801
    points) written as shunt-through ``.s2p`` files, the resistors stated in a comment."""
    from simulated_instruments.parts import DEFAULT_SPREAD, with_spread

    spread_key = {"two-branch": "mlcc", "ladder": "bulk", "inductor": "inductor", "bead": "bead"}
    f = np.geomspace(F_START, F_STOP, 801)
    rng = np.random.default_rng(2026)
    files = []
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
    return files


def _no_op(item: str, options: object) -> str:
    return item


def batch_parts(files: list[str], rounds: int) -> dict[str, float]:
    """Where zbench's batch spends its CPU: per file reading, impedance and the fit,
    and the pool's start, hand-over and stop with tasks that do nothing."""
    from bench.api import fit, load
    from bench.batch import FileOutcome, FitOptions, impedance_of
    from bench.parallel import ordered_map

    def per_file(fn) -> float:
        samples = []
        for _ in range(rounds):
            c = time.process_time()
            for name in files:
                fn(name)
            samples.append((time.process_time() - c) / len(files))
        return statistics.median(samples)

    def made(name: str):
        # As the batch makes it: the port resistors from the file's comments.
        no = {"series_r": None, "mount": None, "fmin": None, "fmax": None, "method": None}
        return impedance_of(name, FileOutcome(name), **no)[0]

    data = {name: made(name) for name in files}
    pool = []
    for _ in range(rounds):
        pool.append(timed(lambda: list(ordered_map(_no_op, files, None, shared=FitOptions())))[1])
    return {
        "reading (Touchstone scan and matrices)": per_file(load),
        "reading, notes and the impedance with its window": per_file(made),
        "fit (auto) of the impedance": per_file(lambda name: fit(data[name])),
        "pool: start, 20 no-op tasks, stop (whole batch)": statistics.median(pool),
    }


def cpu_now() -> float:
    """CPU time of this process and of its children that have ended (their rusage)."""
    import resource

    own = resource.getrusage(resource.RUSAGE_SELF)
    children = resource.getrusage(resource.RUSAGE_CHILDREN)
    return own.ru_utime + own.ru_stime + children.ru_utime + children.ru_stime


def timed(fn) -> tuple[float, float]:
    """(wall, CPU) seconds of ``fn()``; CPU includes worker processes it waited for."""
    t, c = time.perf_counter(), cpu_now()
    fn()
    return time.perf_counter() - t, cpu_now() - c


def batch(folder: Path, rounds: int) -> None:
    print("\n3. Batch of 20 files (801 points, 4 parts x 5 samples): zbench vs VectorFitting")
    from bench.api import load
    from bench.batch import FitOptions, fit_files
    from bench.parallel import available_cores

    files = write_batch_files(folder)
    vf_namespace: dict = {"__name__": "vf_batch"}
    exec(VF_BATCH, vf_namespace)
    vf_files = vf_namespace["vf_files"]
    import skrf as rf

    def zbench(jobs):
        outcomes = list(fit_files(files, FitOptions(model="auto"), jobs))
        assert all(o.error is None for o in outcomes), [o.error for o in outcomes]

    # One untimed pass each, so that lazy imports and first-call costs are paid already.
    zbench(1)
    vf_files(files[:1])
    script = folder / "vf_batch.py"
    script.write_text(VF_BATCH)
    run_timed([ZBENCH, "fit", files[0]])
    run_timed([PYTHON, str(script), files[0]])

    rows: dict[str, list[tuple[float, float]]] = {}
    load_before = os.getloadavg()[0]
    for _ in range(rounds):
        # (a) the work of the batch in this process (imports done), reading included.
        rows.setdefault("a zbench", []).append(timed(lambda: zbench(None)))
        rows.setdefault("a vf", []).append(timed(lambda: vf_files(files)))
        rows.setdefault("a zbench 1", []).append(timed(lambda: zbench(1)))
        rows.setdefault("read zbench", []).append(timed(lambda: [load(f) for f in files]))
        rows.setdefault("read skrf", []).append(timed(lambda: [rf.Network(f) for f in files]))
        # (b) the commands end to end: interpreter, imports, reading, fitting, output.
        for key, args in (
            ("b zbench", [ZBENCH, "fit", *files, "--json"]),
            ("b vf", [PYTHON, str(script), *files]),
            ("b zbench 1", [ZBENCH, "fit", *files, "--json", "--jobs", "1"]),
        ):
            c = cpu_now()
            dt, done = run_timed(args)
            assert done.returncode in (0, 3), done.stderr[-2000:]
            rows.setdefault(key, []).append((dt, cpu_now() - c))
    load_after = os.getloadavg()[0]
    parts = batch_parts(files, rounds)

    def med(key):
        pairs = rows[key]
        return statistics.median(p[0] for p in pairs), statistics.median(p[1] for p in pairs)

    def best(key):
        return min(p[0] for p in rows[key])

    cores = available_cores()
    print(
        f"median of {rounds} rounds (and the best wall time), run alternately; load average "
        f"{load_before:.1f} before, {load_after:.1f} after; {cores} cores"
    )
    print(f"{'':58}{'wall s':>8}{'best':>8}{'CPU s':>8}")
    labels = {
        "a zbench": f"(a) zbench fit_files, {cores} worker processes",
        "a zbench 1": "(a) zbench fit_files, one process (--jobs 1)",
        "a vf": "(a) VectorFitting, this process",
        "read zbench": "    of which reading: zbench (bench.api.load)",
        "read skrf": "    of which reading: scikit-rf (Network)",
        "b zbench": "(b) zbench fit FILE... --json, all cores",
        "b zbench 1": "(b) zbench fit FILE... --json --jobs 1",
        "b vf": "(b) python script: import scikit-rf, read, VectorFitting",
    }
    for key in labels:
        wall, cpu = med(key)
        print(f"{labels[key]:<58}{wall:>8.2f}{best(key):>8.2f}{cpu:>8.2f}")
    vf_wall, vf_cpu = med("a vf")
    zb_wall, zb_cpu = med("a zbench")
    print(
        f"(a) zbench is {vf_wall / zb_wall:.1f} x faster than VectorFitting on all cores "
        f"(median wall; target >= 5 x; best walls {best('a vf') / best('a zbench'):.1f} x), "
        f"{vf_wall / med('a zbench 1')[0]:.1f} x on one core; CPU {vf_cpu / zb_cpu:.1f} x"
    )
    b_vf, b_zb = med("b vf")[0], med("b zbench")[0]
    print(
        f"(b) end to end, start-up included both sides: {b_vf / b_zb:.1f} x "
        f"({b_vf / med('b zbench 1')[0]:.1f} x with --jobs 1)"
    )
    print("zbench's batch, CPU per file and the pool's own cost (median of rounds, one process):")
    for label, value in parts.items():
        print(f"    {label:<54}{value * 1e3:>8.1f} ms")


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


def processor_name() -> str:
    """The processor's model name where the system tells it (Linux), else the platform's."""
    import platform

    try:
        for line in Path("/proc/cpuinfo").read_text().splitlines():
            if line.lower().startswith("model name"):
                return line.split(":", 1)[1].strip()
    except OSError:
        pass
    return platform.processor() or platform.machine()


def machine() -> float:
    """A yardstick for comparing runs on different machines: the processor, and the time
    of one numpy operation on a fit's thinned grid (160 complex points), the per-call
    cost that most of a fit's time is made of."""
    import timeit

    a = np.exp(1j * np.linspace(0, 3, 160))
    b = np.linspace(1, 2, 160)
    best = min(timeit.repeat(lambda: np.abs(a * b), number=20000, repeat=5)) / 20000 / 2
    print(
        f"processor: {processor_name()}; one numpy operation on 160 complex points: "
        f"{best * 1e6:.2f} µs"
    )
    return best


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="fewer repeats, no demo")
    parser.add_argument("--only", default="fits,startup,batch,points,demo", help="parts to run")
    args = parser.parse_args()
    parts = set(args.only.split(","))
    if args.quick:
        parts.discard("demo")
    print(f"{os.cpu_count()} cores; load average {os.getloadavg()[0]:.1f}")
    op_time = machine()
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp)
        if "fits" in parts:
            fits(3 if args.quick else 7, op_time)
        if "startup" in parts:
            startup(3 if args.quick else 7)
        if "batch" in parts:
            batch(folder, 3 if args.quick else 5)
        if "points" in parts:
            points(folder, (10_000, 100_000) if args.quick else (10_000, 100_000, 1_000_000))
        if "demo" in parts:
            demo(folder)
    print(f"load average at the end {os.getloadavg()[0]:.1f}")


if __name__ == "__main__":
    main()
