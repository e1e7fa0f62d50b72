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
one-port response, searched over representation (S, Z, Y), initial pole spacing and
order (2 to 12 poles, and its own ``auto_fit`` on S), the best kept (Gustavsen and Semlyen
1999, docs/references.md §12).

Columns: rms log error over the points inside the window (what each fitter was given),
and for the synthetic files also against the noise-free truth; passivity as
``min Re Z ≥ 0`` on a dense grid from a decade below to a decade above the sweep
(zbench's families are passive by construction; VectorFitting's model is checked the
same way, and S models also by its own ``passivity_test``, without its optional
passivity enforcement); CPU time per fit (for VectorFitting, of the kept fit and of
the whole search).
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


# VectorFitting's search: each representation (S as its documentation recommends, Z, and
# Y, which suits a capacitor's sC), both initial pole spacings it offers (its default
# linear one and the logarithmic one), and model orders from 2 to 12 poles (a complex
# pair counts two), plus its own order search (``auto_fit``, up to 12 poles) on S. The
# best rms log error on the fitted points is kept: generous to VectorFitting, since the
# order is chosen on the very points the error is reported on.
PARAMETERS = ("s", "z", "y")
MAX_ORDER = 12
SPACINGS = ("lin", "log")
POLES = (
    (2, 0), (1, 1), (2, 1), (0, 2), (2, 2), (0, 3), (4, 2), (2, 3), (0, 4),
    (4, 3), (2, 4), (0, 5), (4, 4), (2, 5), (0, 6),
)  # fmt: skip


def _as_z(parameter: str, response):
    if parameter == "z":
        return response
    if parameter == "y":
        return 1.0 / response
    return 50.0 * (1.0 + response) / (1.0 - response)


def _vf_candidate(net, f, z, dense, parameter, how):
    vf = VectorFitting(net)
    t = time.process_time()
    with warnings.catch_warnings(), np.errstate(all="ignore"):
        warnings.simplefilter("ignore")
        if how == "auto":
            vf.auto_fit(parameter_type=parameter, model_order_max=MAX_ORDER)
        else:
            spacing, (n_real, n_cmplx) = how
            vf.vector_fit(
                n_poles_real=n_real,
                n_poles_cmplx=n_cmplx,
                init_pole_spacing=spacing,
                parameter_type=parameter,
                fit_constant=True,
                # A proportional term in S is not passive, and passivity_test refuses it.
                fit_proportional=parameter != "s",
            )
        elapsed = time.process_time() - t
        zf = _as_z(parameter, vf.get_model_response(0, 0, f))
        zd = _as_z(parameter, vf.get_model_response(0, 0, dense))
    if not np.all(np.isfinite(zf)):
        return None
    # VectorFitting's own passivity test works on S models without a proportional term;
    # on Z and Y models it is not available, and Re Z >= 0 on the dense grid stands.
    try:
        passivity_test = len(vf.passivity_test(parameter_type=parameter)) == 0
    except (NotImplementedError, ValueError):
        passivity_test = None
    n_poles = len(vf.poles) + int(np.count_nonzero(np.imag(vf.poles) != 0))
    label = "auto" if how == "auto" else f"{how[0]} {n_poles}p"
    return {
        "rms": rms_log(zf, z),
        "config": f"{parameter.upper()} {label}",
        "re_z_ok": bool(np.all(np.isfinite(zd)) and np.min(zd.real) >= 0),
        "passivity_test": passivity_test,
        "time": elapsed,
        "model": lambda ff, vf=vf, p=parameter: _as_z(p, vf.get_model_response(0, 0, ff)),
    }


def vf_search(f, z, dense):
    """Every VectorFitting candidate of the search above, with its error and passivity."""
    net = rf.Network(
        frequency=rf.Frequency.from_f(f, unit="hz"),
        s=rf.network.z2s(z.reshape(-1, 1, 1), 50.0),
        z0=50.0,
    )
    out = []
    for parameter in PARAMETERS:
        hows = [(sp, poles) for sp in SPACINGS for poles in POLES]
        # auto_fit on Z or Y ran for minutes on one file without ending; on S it is quick.
        hows += ["auto"] if parameter == "s" else []
        for how in hows:
            try:
                candidate = _vf_candidate(net, f, z, dense, parameter, how)
            except Exception:
                candidate = None
            if candidate is not None:
                out.append(candidate)
    return out


def _passive(c) -> bool:
    return c["re_z_ok"] and c["passivity_test"] is not False


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
    candidates = vf_search(f, z, dense)
    out["vf_search_time"] = time.process_time() - t
    best = min(candidates, key=lambda c: c["rms"])
    passive = [c for c in candidates if _passive(c)]
    best_passive = min(passive, key=lambda c: c["rms"]) if passive else None
    out["vf_rms"], out["vf_config"], out["vf_time"] = best["rms"], best["config"], best["time"]
    out["vf_passive"] = _passive(best)
    out["vf_ptest"] = {None: "n/a", True: "pass", False: "FAIL"}[best["passivity_test"]]
    out["vf_passive_rms"] = best_passive["rms"] if best_passive else np.nan
    out["vf_passive_config"] = best_passive["config"] if best_passive else "none"
    out["vf_count"] = len(candidates)
    if truth is not None:
        out["zb_truth"] = rms_log(zb.impedance(f), truth(f))
        out["vf_truth"] = rms_log(best["model"](f), truth(f))
    return out


def main() -> None:
    rows = {}
    with tempfile.TemporaryDirectory() as tmp:
        for name, (path, truth) in synthetic(Path(tmp)).items():
            print(f"fitting {name} ...", file=sys.stderr, flush=True)
            rows[name] = row(name, api.impedance(path), truth)
    for name, options in EXAMPLES.items():
        path = ROOT / "examples" / name
        if path.exists():
            print(f"fitting {name} ...", file=sys.stderr, flush=True)
            rows[name] = row(name, api.impedance(path, **options))
    head = (
        "| file | zbench model | zbench rms | zbench vs truth | zbench passive | zbench CPU s "
        "| VF best (repr., spacing, poles) | VF rms | VF vs truth | VF passive "
        "(Re Z / passivity_test) | VF CPU s (that fit / whole search) "
        "| VF best passive | its rms | zbench noise ratio | points left out |"
    )
    print(head)
    print("|" + " --- |" * (head.count("|") - 1))
    for name, r in rows.items():
        print(
            f"| {name} | {r['zb_model']} | {r['zb_rms']:.4f} | "
            f"{r.get('zb_truth', float('nan')):.4f} | {'yes' if r['zb_passive'] else 'NO'} | "
            f"{r['zb_time']:.3f} | {r['vf_config']} | {r['vf_rms']:.4f} | "
            f"{r.get('vf_truth', float('nan')):.4f} | "
            f"{'yes' if r['vf_passive'] else 'NO'} ({r['vf_ptest']}) | "
            f"{r['vf_time']:.3f} / {r['vf_search_time']:.1f} ({r['vf_count']} fits) | "
            f"{r['vf_passive_config']} | {r['vf_passive_rms']:.4f} | "
            f"{r['zb_noise']:.2f} | {r['zb_excluded']} |"
        )


if __name__ == "__main__":
    main()
