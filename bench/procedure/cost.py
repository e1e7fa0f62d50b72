"""zbench's own work on this machine, timed at the start of a session for the estimate.

The time a run spends on its own work (storing each sweep, the live line, the fits, the
report's figures) depends on the machine and on what else runs on it, more than on the
plan: a busy two-core machine fits and draws several times slower than an idle one. So
the estimate (:mod:`bench.procedure.estimate`) does not take fixed figures for it; the
runner times a small representative piece of the real work before the first step
(:func:`measure`) and the estimate scales it by the plan's counts:

- **per sweep**: one sweep's files written as the run store writes them (the raw
  Touchstone text and the manifest, each atomically, with their flush to disk) and the
  live line's landmarks read from a curve of the plan's point count;
- **per fit**: one fit of an invented part (a capacitor with a constant-loss dielectric,
  or an inductor when the plan holds no capacitor) on the plan's grid, through the real
  fitter with ``auto``;
- **per figure**: not drawn (drawing one took half a second of the session's start on a
  busy two-core machine, before the first sweep): :data:`FIGURE_PER_FIT` timed fits, the
  ratio of a fresh report figure of the invented part (``plots.sample_figure`` of its
  fit, rendered by ``plots.png_bytes``) to its fit, both CPU work that the machine's
  speed and load scale alike;
- **once**: importing what the fit, export and report steps import in this process
  (the fitter, scikit-rf) where it has not yet: they then pay only the work itself.
  Their worker processes start afresh (:mod:`bench.parallel`) and import the fitter,
  and the report's the plotting library too: the estimate counts those imports once
  more per step (``fitter_import_s``, ``plots_import_s``; 0 when this process had them
  already, as a test's does, or when the runner started the workers' server at the
  session's start with them: it imports beside the sweeps). The plotting library is
  imported here (to time it) only where the workers will not have it from that server:
  the report's text needs none of it, and workers forked from this process import it
  here anyway just before (``bench.parallel``).

What it took is in the estimate's record (``costs``), so a slow estimate can be told
from a slow machine. No instrument is touched.
"""

from __future__ import annotations

import contextlib
import dataclasses
import importlib
import json
import math
import sys
import time
from pathlib import Path
from typing import Any

import numpy as np

from bench.procedure.plan_types import Plan

#: The invented part timed for the fits: 10 µF, ESR 5 mΩ, ESL 0.5 nH, loss tangent 0.01
#: (a constant-loss dielectric), its impedance read with 0.5 % noise. Our own values.
_C, _ESR, _ESL, _TAN = 10e-6, 5e-3, 0.5e-9, 0.01
#: An invented power inductor for plans without capacitors: 1 µH, 10 mΩ, 5 pF winding.
_L, _RDC, _CP = 1e-6, 10e-3, 5e-12
_NOISE = 0.005

#: A fresh report figure of the invented part (drawn and rendered to PNG) in timed fits
#: of it, on the demo's grid. Our measurement (the figure and the fit timed in eight fresh
#: processes on a two-core machine at load 2 to 3): 7.7 to 17.7, the middle about 11; the
#: fit's short timing carries most of the spread.
FIGURE_PER_FIT = 11.0


@dataclasses.dataclass(frozen=True)
class Costs:
    """Seconds of wall time on this machine now: one sweep's own work, one fit, one
    report figure (:data:`FIGURE_PER_FIT` fits; 0 for what was not timed), the imports
    (0 when this process had them already), and how long all that took."""

    sweep_s: float
    fit_s: float
    figure_s: float
    took_s: float
    import_s: float = 0.0
    fitter_import_s: float = 0.0
    plots_import_s: float = 0.0
    #: A fresh Python process importing the fitter: the server the workers are forked
    #: from when this process runs threads (``bench.parallel``), else 0.
    server_s: float = 0.0

    def record(self) -> dict[str, float]:
        return {k: round(v, 4) for k, v in dataclasses.asdict(self).items()}


def synthetic_part(plan: Plan, kind: str = "capacitor") -> tuple[np.ndarray, np.ndarray]:
    """(f Hz, Z Ω) of the invented part on the plan's sweep grid, with seeded noise."""
    s = plan.sweep
    points = max(int(s.points), 11)
    if s.spacing == "linear":
        f = np.linspace(s.start, s.stop, points)
    else:
        f = np.geomspace(s.start, s.stop, points)
    w = 2 * np.pi * f
    if kind == "capacitor":
        # Constant loss tangent: Y = jωC·(jω/ω_ref)^(−2·tanδ/π), nominal C at 1 kHz.
        y = 1j * w * _C * (1j * w / (2 * np.pi * 1e3)) ** (-2 * _TAN / np.pi)
        z = _ESR + 1j * w * _ESL + 1 / y
    else:
        z = 1 / (1 / (_RDC + 1j * w * _L) + 1j * w * _CP)
    rng = np.random.default_rng(1)
    z = z * (1 + _NOISE * (rng.standard_normal(f.size) + 1j * rng.standard_normal(f.size)))
    return f, z


def _timed(fn: Any) -> tuple[float, Any]:
    start = time.perf_counter()
    value = fn()
    return time.perf_counter() - start, value


#: Costs timed in this process are reused for this long (s) by a later session on a plan
#: of the same shape (several runs in one process, as the tests make): the machine's
#: speed does not change between them, and timing again would slow every run.
REUSE_S = 120.0
_timed_here: dict[tuple[Any, ...], tuple[float, Costs]] = {}


def measure(
    plan: Plan,
    folder: Path,
    manifest: dict[str, Any] | None = None,
    *,
    sweeps: bool = True,
    fits: bool = True,
    figures: bool = True,
    workers_ready: bool = False,
) -> Costs:
    """Time one sweep's own work (files written in ``folder``, removed after) and one
    fit, and count a figure as :data:`FIGURE_PER_FIT` fits, as asked; what was not asked
    costs 0. Reused within :data:`REUSE_S` for the same plan shape.

    ``workers_ready``: the workers' server was started at the session's start with the
    steps' modules (``bench.parallel.start_server``); it imports them beside the sweeps,
    so the workers import nothing and no server start is timed or counted."""
    key = (plan.sweep.points, plan.sweep.start, plan.sweep.stop, sweeps, fits, figures)
    key += tuple(sorted({p.spec.kind for p in plan.parts}))
    now = time.monotonic()
    if key in _timed_here and now - _timed_here[key][0] < REUSE_S:
        # The imports and the workers' server are paid by then.
        return dataclasses.replace(
            _timed_here[key][1],
            took_s=0.0,
            import_s=0.0,
            fitter_import_s=0.0,
            plots_import_s=0.0,
            server_s=0.0,
        )
    costs = _measure(
        plan,
        folder,
        manifest,
        sweeps=sweeps,
        fits=fits,
        figures=figures,
        plots=figures and not workers_ready,
    )
    if workers_ready:
        costs = dataclasses.replace(costs, fitter_import_s=0.0, plots_import_s=0.0)
    _timed_here[key] = (now, costs)
    return costs


def _measure(
    plan: Plan,
    folder: Path,
    manifest: dict[str, Any] | None,
    *,
    sweeps: bool,
    fits: bool,
    figures: bool,
    plots: bool,
) -> Costs:
    """The timings :func:`measure` asks for; ``plots``: time importing the plotting
    library in this process too (the workers of the report step import it once)."""
    started = time.perf_counter()
    kinds = {p.spec.kind for p in plan.parts}
    kind = "capacitor" if kinds & {"mlcc", "bulk"} or not kinds else "inductor"
    f, z = synthetic_part(plan, kind)
    sweep_s = fit_s = figure_s = import_s = server_s = 0.0
    each: dict[str, float] = {}
    server = _start_server_probe() if fits or figures else None
    if sweeps:
        sweep_s = _sweep_work(folder, f, z, kind, manifest or {})
    if fits or figures:
        # What the fit, export and report steps import in this process (the fitter,
        # the corrections with scikit-rf, the report's text), and the plotting library
        # where the report's workers take it from this process: timed here once.
        modules = ["bench.core.fitting", "bench.plots"] if plots else ["bench.core.fitting"]
        modules += ["bench.procedure.processing", "bench.exports"]
        modules += ["bench.report"] if figures else []
        for name in modules:
            if name not in sys.modules:
                each[name], _ = _timed(lambda name=name: importlib.import_module(name))
        import_s = sum(each.values())
        from bench.core.fitting import fit_impedance

        sigma = np.full(f.size, _NOISE * math.sqrt(2))
        fit_s, _ = _timed(lambda: fit_impedance(f, z, rel_uncertainty=sigma))
        if figures:
            figure_s = FIGURE_PER_FIT * fit_s
        if not fits:
            fit_s = 0.0
    if server is not None:
        server_s = _server_seconds(*server)
    took = time.perf_counter() - started
    return Costs(
        sweep_s,
        fit_s,
        figure_s,
        took,
        import_s,
        each.get("bench.core.fitting", 0.0) if fits or figures else 0.0,
        each.get("bench.plots", 0.0) if plots else 0.0,
        server_s,
    )


def _start_server_probe() -> tuple[Any, float] | None:
    """A fresh interpreter importing the fitter, started now (it runs beside the other
    timings), when the workers would be forked from such a server; else None."""
    import subprocess
    import threading

    if threading.active_count() == 1:
        return None  # the workers are forked from this process, imports and all
    if _server_running():
        return None  # started by an earlier run of this process: it is reused
    code = "import time, bench.core.fitting; print(time.time())"
    start = time.time()
    try:
        child = subprocess.Popen(
            [sys.executable, "-c", code], stdout=subprocess.PIPE, stderr=subprocess.DEVNULL
        )
    except OSError:
        return None
    return child, start


def _server_running() -> bool:
    """Whether this process's forkserver already runs (multiprocessing keeps its pid)."""
    from multiprocessing import forkserver

    state = getattr(forkserver, "_forkserver", None)
    return getattr(state, "_forkserver_pid", None) is not None


def _server_seconds(child: Any, start: float) -> float:
    """Wall seconds from the probe's start to its imports done (0 if it failed)."""
    import subprocess

    try:
        out, _ = child.communicate(timeout=120)
        return max(float(out.decode().strip()) - start, 0.0) if child.returncode == 0 else 0.0
    except (subprocess.TimeoutExpired, ValueError):
        child.kill()
        child.communicate()
        return 0.0


def _sweep_work(folder: Path, f: np.ndarray, z: np.ndarray, kind: str, manifest: dict) -> float:
    """One sweep's files (four S-parameter columns of text, and the manifest rewritten)
    and the live line's landmarks, as the steps do them."""
    from bench.core.landmarks import landmarks_for
    from bench.files import atomic_write_text

    rows = "\n".join(
        f"{x:.9e} " + " ".join(f"{v.real:.9e} {v.imag:.9e}" for v in (s, s, s, s))
        for x, s in zip(f, z / (z + 25.0), strict=True)
    )
    text = json.dumps(manifest, indent=2, default=str)
    raw = folder / ".timing-raw.tmp"
    record = folder / ".timing-manifest.tmp"
    start = time.perf_counter()
    try:
        atomic_write_text(raw, rows + "\n")
        atomic_write_text(record, text + "\n")
        landmarks_for(kind, f, z)
        return time.perf_counter() - start
    except OSError:
        return 0.0  # a folder that refuses writes: the first step says so, not the timing
    finally:
        for path in (raw, record):
            with contextlib.suppress(OSError):
                path.unlink(missing_ok=True)
