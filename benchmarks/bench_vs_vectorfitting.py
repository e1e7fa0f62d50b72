"""zbench's passive equivalent circuits against scikit-rf's VectorFitting, file by file.

Run on purpose, not by the test suite:

    .venv/bin/python benchmarks/bench_vs_vectorfitting.py

The files: the examples (``examples/``) and synthetic measurements with bench
artefacts made here and written as Touchstone files into a temporary folder (a
class II MLCC with a constant loss tangent, √f conductor loss and a weak mode, measured
with a residual through delay and three glitched points; an inductor with √f winding
loss; a ferrite bead with a Cole-Cole permeability; the truths are those of
``tests/core/test_fit_artefacts.py``). Each file is loaded through ``bench.api`` (its
window and uncertainties), then fitted by zbench ``auto`` and by VectorFitting on the
one-port Z (3 real + 3 complex-pair poles, constant and proportional terms; Gustavsen
and Semlyen 1999, docs/references.md §12).

Columns: rms log error over the points inside the window (what each fitter was given),
and for the synthetic files also against the noise-free truth; passivity as
``min Re Z ≥ 0`` on a dense grid from a decade below to a decade above the sweep
(zbench's families are passive by construction; VectorFitting's model is checked the
same way, without its optional passivity enforcement); CPU time per fit.
"""

from __future__ import annotations

import os

for _name in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_name, "1")

import sys  # noqa: E402
import tempfile  # noqa: E402
import time  # noqa: E402
import warnings  # noqa: E402
from pathlib import Path  # noqa: E402

import numpy as np  # noqa: E402
import skrf as rf  # noqa: E402
from skrf.vectorFitting import VectorFitting  # noqa: E402

from bench import api  # noqa: E402
from bench.core.conversions import shunt_through_s21  # noqa: E402
from bench.core.fitting import fit_impedance  # noqa: E402

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT / "tests" / "core"))
from test_fit_artefacts import (  # noqa: E402
    F_CAP,
    F_IND,
    cole_cole_bead,
    lossy_mlcc,
    skin_inductor,
)

EXAMPLES = {
    "mlcc_22u.s2p": {"mount": ROOT / "examples" / "mount_short.s2p"},
    "bulk_330u.s2p": {},
    "inductor_2u2.s2p": {},
    "bead_600r.s1p": {},
}


def write_s2p(path: Path, f, z, *, delay=0.0, glitches=(), seed=1) -> None:
    """A through-normalised shunt-through file of ``z`` with 0.1 % noise, a residual
    delay and glitched points."""
    rng = np.random.default_rng(seed)
    s21 = shunt_through_s21(z) * np.exp(2j * np.pi * f * delay)
    s21 = s21 * (1 + 1e-3 * (rng.standard_normal(f.size) + 1j * rng.standard_normal(f.size)))
    for i, g in glitches:
        s21[i] *= g
    s = np.zeros((f.size, 2, 2), complex)
    s[:, 0, 0] = s[:, 1, 1] = s21 - 1
    s[:, 0, 1] = s[:, 1, 0] = s21
    net = rf.Network(frequency=rf.Frequency.from_f(f, unit="hz"), s=s, z0=50.0)
    net.write_touchstone(str(path.with_suffix("")), form="ri")


def synthetic(folder: Path) -> dict[str, tuple[Path, object]]:
    out = {}
    cases = {
        "art_mlcc10u.s2p": (
            F_CAP,
            lossy_mlcc,
            {"delay": 1.5e-10, "glitches": ((150, 1.4), (300, 0.6 * np.exp(0.4j)), (420, 1.25))},
        ),
        "art_inductor.s2p": (F_IND, skin_inductor, {}),
        "art_bead.s2p": (F_IND, cole_cole_bead, {}),
    }
    for name, (f, truth, options) in cases.items():
        path = folder / name
        write_s2p(path, f, truth(f), **options)
        out[name] = (path, truth)
    return out


def vf_fit(f, z):
    net = rf.Network(
        frequency=rf.Frequency.from_f(f, unit="hz"),
        s=rf.network.z2s(z.reshape(-1, 1, 1), 50.0),
        z0=50.0,
    )
    vf = VectorFitting(net)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        vf.vector_fit(
            n_poles_real=3,
            n_poles_cmplx=3,
            init_pole_spacing="log",
            parameter_type="z",
            fit_constant=True,
            fit_proportional=True,
        )
    return lambda ff: vf.get_model_response(0, 0, ff)


def rms_log(a, b) -> float:
    return float(np.sqrt(np.mean(np.abs(np.log(a / b)) ** 2)))


def row(name, data, truth=None):
    keep = data.inside_window & np.isfinite(data.z)
    f, z = data.f[keep], data.z[keep]
    dense = np.geomspace(f[0] / 10, f[-1] * 10, 4000)
    out = {}
    t = time.process_time()
    zb = fit_impedance(
        data.f, data.z, rel_uncertainty=data.rel_uncertainty, valid=data.inside_window
    )
    out["zb_time"] = time.process_time() - t
    out["zb_model"] = f"{zb.model}/{zb.order}"
    out["zb_rms"] = rms_log(zb.impedance(f), z)
    out["zb_passive"] = bool(np.min(zb.impedance(dense).real) >= 0)
    out["zb_noise"] = zb.quality.noise_ratio
    out["zb_excluded"] = zb.quality.points_excluded
    t = time.process_time()
    try:
        model = vf_fit(f, z)
        out["vf_time"] = time.process_time() - t
        out["vf_rms"] = rms_log(model(f), z)
        out["vf_passive"] = bool(np.min(model(dense).real) >= 0)
    except Exception as exc:  # a benchmark reports, it does not stop
        out["vf_time"], out["vf_rms"], out["vf_passive"] = time.process_time() - t, np.nan, False
        print(f"  VectorFitting failed on {name}: {exc}")
    if truth is not None:
        out["zb_truth"] = rms_log(zb.impedance(f), truth(f))
        out["vf_truth"] = rms_log(model(f), truth(f)) if np.isfinite(out["vf_rms"]) else np.nan
    return out


def main() -> None:
    rows = {}
    with tempfile.TemporaryDirectory() as tmp:
        for name, (path, truth) in synthetic(Path(tmp)).items():
            rows[name] = row(name, api.impedance(path), truth)
    for name, options in EXAMPLES.items():
        path = ROOT / "examples" / name
        if path.exists():
            rows[name] = row(name, api.impedance(path, **options))
    head = (
        "| file | zbench model | zbench rms | VF rms | zbench vs truth | VF vs truth | "
        "zbench passive | VF passive | zbench noise ratio | points left out | "
        "zbench CPU s | VF CPU s |"
    )
    print(head)
    print("|" + " --- |" * (head.count("|") - 1))
    for name, r in rows.items():
        print(
            f"| {name} | {r['zb_model']} | {r['zb_rms']:.4f} | {r['vf_rms']:.4f} | "
            f"{r.get('zb_truth', float('nan')):.4f} | {r.get('vf_truth', float('nan')):.4f} | "
            f"{'yes' if r['zb_passive'] else 'NO'} | {'yes' if r['vf_passive'] else 'NO'} | "
            f"{r['zb_noise']:.2f} | {r['zb_excluded']} | {r['zb_time']:.3f} | {r['vf_time']:.3f} |"
        )


if __name__ == "__main__":
    main()
