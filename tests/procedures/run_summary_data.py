"""A small run built in memory for the export and report tests.

Invented parts from :mod:`simulated_instruments.parts`, turned into noisy shunt-through
measurements (docs/design.md §4), through the real impedance chain and the real fitter, into a
:class:`bench.results.RunSummary`. ``conftest.py`` imports it by file path and builds
the run once per test session.
"""

from __future__ import annotations

import numpy as np

from bench.core.conversions import shunt_through_s21
from bench.core.fitting import fit_impedance
from bench.core.impedance import impedance_from_shunt_through
from bench.results import PartSpec, RunSummary, SampleResult
from simulated_instruments.parts import BulkCapacitor, FerriteBead, Mlcc, PowerInductor

#: Capacitances of the MLCC lot at 0 V (F, invented): s3 lies outside 10 µF ± 10 %.
MLCC_C = {"s1": 10.0e-6, "s2": 9.6e-6, "s3": 11.5e-6}
MLCC_BIAS = 3.0  # V, second bias point of s1 and s2

MLCC_SPEC = PartSpec(
    name="ZBEX-C10U",
    kind="mlcc",
    nominal=10e-6,
    tolerance=0.10,
    rated_voltage=6.3,
    description='invented 10 µF <X5R> & "6.3 V" <script>alert(1)</script>',
)
INDUCTOR_SPEC = PartSpec(name="ZBEX-L2U2", kind="inductor", nominal=2.2e-6, tolerance=0.2)
BEAD_SPEC = PartSpec(
    name="ZBEX-F600", kind="bead", nominal=600.0, tolerance=0.25, nominal_at_hz=100e6
)
BULK_SPEC = PartSpec(name="ZBEX-P330U", kind="bulk", description="invented polymer, no tolerance")


def measure(part, f, *, series_r=0.0, bias_v=0.0, seed=0):
    """ImpedanceData of ``part`` as a shunt-through measurement with seeded noise."""
    rng = np.random.default_rng(seed)
    s21 = shunt_through_s21(part.impedance(f, bias_v), 50.0, series_r)
    noise = 1e-4 * (rng.standard_normal(f.size) + 1j * rng.standard_normal(f.size))
    floor = 3e-6 * (rng.standard_normal(f.size) + 1j * rng.standard_normal(f.size))
    s21n = s21 * (1 + noise) + floor
    data = impedance_from_shunt_through(f, s21n, series_r=series_r)
    return data, s21n


def _sample(spec, name, part, f, *, series_r=0.0, bias_v=0.0, seed=0, keep_s=False, position=1):
    data, s21n = measure(part, f, series_r=series_r, bias_v=bias_v, seed=seed)
    fit = fit_impedance(
        data.f,
        data.z,
        model=spec.model,
        rel_uncertainty=data.rel_uncertainty,
        valid=data.inside_window,
    )
    corrected = None
    if keep_s:
        corrected = np.empty((f.size, 2, 2), dtype=complex)
        corrected[:, 0, 0] = corrected[:, 1, 1] = s21n - 1
        corrected[:, 0, 1] = corrected[:, 1, 0] = s21n
    return SampleResult(
        part=spec.name,
        sample=name,
        data=data,
        fit=fit,
        bias_v=bias_v,
        position=position,
        raw_file=f"raw/{spec.name}_{name}_{bias_v:g}V.s2p",
        corrected_s=corrected,
    )


def build() -> RunSummary:
    f_cap = np.logspace(2, 8.3, 161)
    samples = []
    for index, (name, c) in enumerate(MLCC_C.items()):
        part = Mlcc(name=MLCC_SPEC.name, capacitance=c, esl=0.45e-9, esr=3e-3, rated_voltage=6.3)
        samples.append(
            _sample(
                MLCC_SPEC, name, part, f_cap, seed=10 + index, keep_s=index == 0, position=index + 1
            )
        )
        if name in ("s1", "s2"):
            samples.append(
                _sample(
                    MLCC_SPEC,
                    name,
                    part,
                    f_cap,
                    bias_v=MLCC_BIAS,
                    seed=20 + index,
                    position=index + 1,
                )
            )
    failed_data, _ = measure(Mlcc(name=MLCC_SPEC.name), f_cap, seed=30)
    samples.append(
        SampleResult(
            part=MLCC_SPEC.name,
            sample="s4",
            data=failed_data,
            fit=None,
            position=4,
            fit_error="part not seated: <open circuit> suspected",
        )
    )
    f_ind = np.logspace(3, 8.5, 161)
    for index, l_value in enumerate((2.2e-6, 2.35e-6)):
        part = PowerInductor(name=INDUCTOR_SPEC.name, inductance=l_value, winding_capacitance=5e-12)
        # Plain 50 Ω ports: the parallel resonance rises above the window's ceiling.
        samples.append(
            _sample(INDUCTOR_SPEC, f"s{index + 1}", part, f_ind, seed=40 + index, position=5)
        )
    f_bead = np.logspace(5, 9, 161)
    for index, r_value in enumerate((650.0, 560.0)):
        part = FerriteBead(
            name=BEAD_SPEC.name, resistance=r_value, inductance=1.1e-6, capacitance=0.9e-12
        )
        samples.append(
            _sample(
                BEAD_SPEC,
                f"s{index + 1}",
                part,
                f_bead,
                series_r=499.0,
                seed=50 + index,
                position=6,
            )
        )
    bulk = BulkCapacitor(name=BULK_SPEC.name, capacitance=330e-6, esl=2.2e-9)
    samples.append(_sample(BULK_SPEC, "s1", bulk, np.logspace(2, 8, 161), seed=60, position=7))
    return RunSummary(
        run_id="20260101-120000-demo",
        procedure_name="outputs test <run> & co",
        parts=(MLCC_SPEC, INDUCTOR_SPEC, BEAD_SPEC, BULK_SPEC),
        samples=tuple(samples),
        setup={
            "analyzer": "ZBENCH,SIM-VNA<1>,0001,1.0",
            "start_hz": 100.0,
            "stop_hz": 200e6,
            "points": 161,
            "if_bandwidth_hz": 100.0,
            "series_r_ohm": 0.0,
            "transformer": True,
            "started": "2026-01-01T12:00:00Z",
        },
        calibration={"method": "through + SOLT", "age_s": 5400.0, "crossover_hz": 1e6},
        ground_loop={"detected": False, "dc_error_ohm": 6.5e-4, "corner_hz": 2e3},
        warnings=("one sample could not be fitted",),
        software_version="0.1.0",
    )
