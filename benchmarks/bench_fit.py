"""Fit benchmark: zbench's equivalent-circuit fits against scikit-rf's VectorFitting.

Run on purpose, not by the test suite:

    .venv/bin/python benchmarks/bench_fit.py            # full run
    .venv/bin/python benchmarks/bench_fit.py --quick    # fewer repeats, for a smoke run

Part 1 times one fit per family (fixed model and ``auto``) at 801 and 1601 points.
Part 2 fits a batch of 20 generated measurements (5 samples of each of 4 invented parts,
with lot spread) with zbench ``auto`` and with VectorFitting on the same one-port Z
(docs/references.md §8: fitting Z behaves better than the two-port S of a shunt element), in the
same run, and reports time, accuracy and passivity.

Measurements are simulated the way the bench measures: the true part's impedance
(``simulated_instruments.parts``, richer than any fit model) goes to shunt-through S21
with 0.01 dB trace noise and a -120 dB noise floor, then back to Z with per-point
uncertainty and window marks (``bench.core.impedance``).

Accuracy is the RMS over points of |ln Zmodel - ln Z| (docs/design.md §3), against the noisy
measurement and against the noise-free truth. Passivity: Re Z >= 0 on a dense grid
from a decade below to a decade above the sweep (and, for VectorFitting, stable poles).
Times are CPU time of this process (``time.process_time``), so other load on the
machine disturbs them less than wall-clock time.
"""

from __future__ import annotations

import os

# One BLAS thread: both fitters then run alike, and CPU time is not inflated by threads
# spinning on a shared machine. Set before numpy loads.
for _name in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_name, "1")

import argparse  # noqa: E402
import statistics  # noqa: E402
import time  # noqa: E402
import warnings  # noqa: E402

import numpy as np  # noqa: E402
import skrf as rf  # noqa: E402
from skrf.vectorFitting import VectorFitting  # noqa: E402

from bench.core.conversions import shunt_through_s21  # noqa: E402
from bench.core.fitting import fit_impedance  # noqa: E402
from bench.core.impedance import impedance_from_shunt_through  # noqa: E402
from simulated_instruments.parts import (  # noqa: E402
    DEFAULT_SPREAD,
    BulkCapacitor,
    FerriteBead,
    Mlcc,
    PowerInductor,
    with_spread,
)

# Invented parts, one per family, with the series resistance each set-up would use.
PARTS = {
    "two-branch": (Mlcc(name="MC10U", capacitance=10e-6, esl=0.45e-9, esr=4e-3), 0.0),
    "ladder": (BulkCapacitor(name="PB330", capacitance=330e-6, line_resistance=30e-3), 0.0),
    "inductor": (
        PowerInductor(
            name="PL1U",
            inductance=1e-6,
            r_dc=8e-3,
            core_loss_resistance=150.0,
            winding_capacitance=10e-12,
        ),
        450.0,
    ),
    "bead": (FerriteBead(name="FB600", inductance2=0.4e-6, resistance2=120.0), 450.0),
}
SPREAD_KEY = {"two-branch": "mlcc", "ladder": "bulk", "inductor": "inductor", "bead": "bead"}
F_START, F_STOP = 1e3, 200e6


def measure(part, f, seed, series_r):
    rng = np.random.default_rng(seed)
    s21 = shunt_through_s21(part.impedance(f), 50.0, series_r)
    trace = 10 ** (0.01 / 20) - 1
    floor = 10 ** (-120 / 20)
    n1 = (rng.normal(size=f.size) + 1j * rng.normal(size=f.size)) / np.sqrt(2)
    n2 = (rng.normal(size=f.size) + 1j * rng.normal(size=f.size)) / np.sqrt(2)
    return impedance_from_shunt_through(
        f,
        s21 * (1 + trace * n1) + floor * n2,
        series_r=series_r,
        noise_floor_db=-120.0,
        trace_noise_db=0.01,
    )


def rms_log(z_model, z_ref):
    return float(np.sqrt(np.mean(np.abs(np.log(z_model / z_ref)) ** 2)))


def dense_grid(f):
    return np.logspace(np.log10(f[0]) - 1, np.log10(f[-1]) + 1, 4000)


def timed(fn, repeats, clock=time.process_time):
    """(median and shortest time of ``repeats`` calls of ``fn`` by ``clock``, s; the last
    result). On a shared machine the shortest is the least disturbed by other load."""
    times, out = [], None
    for _ in range(repeats):
        t = clock()
        out = fn()
        times.append(clock() - t)
    return statistics.median(times), min(times), out


def family_fits(repeats, clock=time.process_time):
    """Each family's part at 801 and 1601 points, fitted by its own model and by ``auto``:
    yields (family, points, model, median and shortest time s by ``clock``, the FitResult)."""
    for n in (801, 1601):
        f = np.geomspace(F_START, F_STOP, n)
        for family, (part, series_r) in PARTS.items():
            data = measure(part, f, 1, series_r)
            for model in (family, "auto"):
                dt, best, res = timed(
                    lambda data=data, model=model: fit_impedance(
                        data.f,
                        data.z,
                        model=model,
                        rel_uncertainty=data.rel_uncertainty,
                        valid=data.inside_window,
                    ),
                    repeats,
                    clock,
                )
                yield family, n, model, dt, best, res


#: VectorFitting's configuration in every benchmark that compares with it.
VF_OPTIONS = {
    "n_poles_real": 3,
    "n_poles_cmplx": 3,
    "init_pole_spacing": "log",
    "parameter_type": "z",
    "fit_constant": True,
    "fit_proportional": True,
}


def vf_fit(f, z):
    """VectorFitting on the one-port Z; returns (model Z on f, model Z on a dense grid, poles).

    Poles: 3 real and 3 complex pairs, log-spaced start, constant and proportional terms
    (the proportional term is the inductive ESL asymptote). Tried first with DC enforced
    (scikit-rf's default) and, if that fails, without.
    """
    net = rf.Network(
        frequency=rf.Frequency.from_f(f, unit="hz"),
        s=rf.network.z2s(z.reshape(-1, 1, 1), 50.0),
        z0=50.0,
    )
    vf = VectorFitting(net)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        vf.vector_fit(**VF_OPTIONS)
        zf = vf.get_model_response(0, 0, f)
        zd = vf.get_model_response(0, 0, dense_grid(f))
    return zf, zd, vf.poles


def part1(repeats):
    print("\nPart 1: one fit per family (median CPU time of", repeats, "runs)")
    print(f"{'family':<12}{'points':>7}{'model':>12}{'ms':>9}{'rms log err':>13}{'chosen':>16}")
    for family, n, model, dt, _, res in family_fits(repeats):
        chosen = f"{res.model}/{res.order}"
        print(
            f"{family:<12}{n:>7}{model:>12}{dt * 1e3:>9.1f}"
            f"{res.quality.rms_log_error:>13.4f}{chosen:>16}"
        )


def part2():
    print("\nPart 2: batch of 20 generated measurements (801 points), zbench auto vs VectorFitting")
    f = np.logspace(np.log10(F_START), np.log10(F_STOP), 801)
    rng = np.random.default_rng(2026)
    rows = {name: {"zb": [], "vf": []} for name in PARTS}
    zb_time = vf_time = 0.0
    for family, (part, series_r) in PARTS.items():
        for sample in range(5):
            truth_part = with_spread(part, rng, DEFAULT_SPREAD[SPREAD_KEY[family]])
            data = measure(truth_part, f, 100 + sample, series_r)
            z_true = truth_part.impedance(f)
            use = data.inside_window
            t = time.process_time()
            res = fit_impedance(data.f, data.z, rel_uncertainty=data.rel_uncertainty, valid=use)
            zb_time += time.process_time() - t
            zd = res.impedance(dense_grid(f))
            rows[family]["zb"].append(
                (
                    rms_log(res.impedance(f[use]), data.z[use]),
                    rms_log(res.impedance(f), z_true),
                    bool(np.all(zd.real >= 0)),
                    f"{res.model}/{res.order}",
                )
            )
            t = time.process_time()
            zf, zd, poles = vf_fit(f[use], data.z[use])
            vf_time += time.process_time() - t
            passive = bool(np.all(zd.real >= 0) and np.all(poles.real < 0))
            rows[family]["vf"].append(
                (
                    rms_log(zf, data.z[use]),
                    rms_log(
                        np.interp(np.log(f), np.log(f[use]), zf.real)
                        + 1j * np.interp(np.log(f), np.log(f[use]), zf.imag),
                        z_true,
                    ),
                    passive,
                    f"{len(poles)} poles",
                )
            )
    print(
        f"{'family':<12}{'fitter':<15}{'rms vs meas':>13}{'rms vs truth':>14}"
        f"{'worst':>9}{'passive':>9}  models"
    )
    for family, pair in rows.items():
        for key, label in (("zb", "zbench auto"), ("vf", "VectorFitting")):
            items = pair[key]
            meas = [i[0] for i in items]
            truth = [i[1] for i in items]
            passive = sum(i[2] for i in items)
            models = ", ".join(sorted({i[3] for i in items}))
            print(
                f"{family:<12}{label:<15}{statistics.median(meas):>13.4f}"
                f"{statistics.median(truth):>14.4f}{max(meas):>9.4f}{passive:>6}/{len(items)}  "
                f"{models}"
            )
    print(f"\nbatch CPU time: zbench {zb_time:.2f} s, VectorFitting {vf_time:.2f} s (20 fits each)")


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="one repeat per timing")
    args = parser.parse_args()
    part1(1 if args.quick else 3)
    part2()


if __name__ == "__main__":
    main()
