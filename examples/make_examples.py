"""Write the example measurements in this folder (run: ``python examples/make_examples.py``).

Each file is what a calibrated shunt-through measurement of an invented part would
store: the part's true impedance (from :mod:`simulated_instruments.parts`, richer than
any fit model) plus the mount it sits on, turned into the through-normalised
transmission of docs/design.md §4, ``S21n = 2Z / (2Z + Ze)`` with ``Ze = Z0 + Rs``, and
seeded noise: a multiplicative trace noise and an additive noise floor relative to the
through. S11 and S22 are those of the same ideal shunt element, ``S21n − 1``; zbench
reads only S21. The output is the same on every run (fixed seeds).

The parts and every value here are invented for the examples; none is a maker's part.
"""

from __future__ import annotations

import sys
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parent))

from bench.touchstone import write_touchstone_s, write_touchstone_z  # noqa: E402
from simulated_instruments.parts import (  # noqa: E402
    BulkCapacitor,
    FerriteBead,
    Mlcc,
    PowerInductor,
)

Z0 = 50.0
#: Shorted mount of the example fixture: 0.12 mΩ and 0.08 nH (invented).
MOUNT_R = 0.12e-3
MOUNT_L = 0.08e-9
#: Noise of the example analyser: trace noise (dB RMS) and floor (dB below the through).
TRACE_NOISE_DB = 0.01
NOISE_FLOOR_DB = -110.0


def grid(start: float, stop: float, points: int) -> np.ndarray:
    """Logarithmic frequency grid (Hz), as a log sweep of the analyser gives it."""
    return np.logspace(np.log10(start), np.log10(stop), points)


def mount(f: np.ndarray) -> np.ndarray:
    return MOUNT_R + 2j * np.pi * f * MOUNT_L


def measured_s21(z: np.ndarray, series_r: float, rng: np.random.Generator) -> np.ndarray:
    """Through-normalised S21 of a shunt impedance ``z`` with seeded noise."""
    ze = Z0 + series_r
    s21 = 2 * z / (2 * z + ze)  # docs/design.md §4
    sigma_m = 10 ** (TRACE_NOISE_DB / 20) - 1
    floor = 10 ** (NOISE_FLOOR_DB / 20)
    n = z.size
    multiplicative = 1 + sigma_m / np.sqrt(2) * (
        rng.standard_normal(n) + 1j * rng.standard_normal(n)
    )
    additive = floor / np.sqrt(2) * (rng.standard_normal(n) + 1j * rng.standard_normal(n))
    return s21 * multiplicative + additive


def two_port(s21: np.ndarray) -> np.ndarray:
    s = np.empty((s21.size, 2, 2), dtype=complex)
    s[:, 0, 0] = s[:, 1, 1] = s21 - 1
    s[:, 0, 1] = s[:, 1, 0] = s21
    return s


def write_s2p(
    name: str, f: np.ndarray, z: np.ndarray, series_r: float, seed: int, note: str
) -> Path:
    s21 = measured_s21(z, series_r, np.random.default_rng(seed))
    comments = [
        f"zbench example: {note}",
        "invented part; calibrated two-port shunt-through measurement,",
        "S21 normalised to the through",
        f"port series resistors: {series_r:g} ohm each" if series_r else "no port series resistors",
    ]
    return write_touchstone_s(HERE / name, f, two_port(s21), comments=comments)


def main() -> list[Path]:
    written = []
    # MLCC, 22 µF class II, on the example mount; plain 50 Ω set-up.
    mlcc = Mlcc(name="ZBEX-C22U", capacitance=22e-6, esl=0.42e-9, esr=2.6e-3, rated_voltage=6.3)
    f = grid(100.0, 200e6, 401)
    written.append(
        write_s2p("mlcc_22u.s2p", f, mlcc.impedance(f) + mount(f), 0.0, 11, "MLCC ZBEX-C22U, 22 uF")
    )
    # The same fixture's mount short, on the MLCC's grid.
    written.append(write_s2p("mount_short.s2p", f, mount(f), 0.0, 12, "shorted mount"))
    # Bulk polymer capacitor, 330 µF; plain 50 Ω set-up, no mount (already removed).
    bulk = BulkCapacitor(
        name="ZBEX-P330U", capacitance=330e-6, line_resistance=25e-3, esr=6e-3, esl=2.2e-9
    )
    f = grid(100.0, 100e6, 401)
    written.append(
        write_s2p("bulk_330u.s2p", f, bulk.impedance(f), 0.0, 13, "bulk ZBEX-P330U, 330 uF")
    )
    # Power inductor, 2.2 µH, measured with 499 Ω in series at each port.
    inductor = PowerInductor(
        name="ZBEX-L2U2", inductance=2.2e-6, r_dc=14e-3, winding_capacitance=5e-12
    )
    f = grid(1e3, 300e6, 401)
    written.append(
        write_s2p(
            "inductor_2u2.s2p", f, inductor.impedance(f), 499.0, 14, "inductor ZBEX-L2U2, 2.2 uH"
        )
    )
    # Ferrite bead, about 600 Ω at 100 MHz: a 1-port Z file, measured with 499 Ω resistors.
    bead = FerriteBead(
        name="ZBEX-F600", r_dc=45e-3, inductance=1.1e-6, resistance=650.0, capacitance=0.9e-12
    )
    f = grid(100e3, 1e9, 401)
    ze = Z0 + 499.0
    s21 = measured_s21(bead.impedance(f), 499.0, np.random.default_rng(15))
    z = (ze / 2) * s21 / (1 - s21)  # docs/design.md §4, inverted
    written.append(
        write_touchstone_z(
            HERE / "bead_600r.s1p",
            f,
            z,
            comments=[
                "zbench example: ferrite bead ZBEX-F600, about 600 ohm at 100 MHz",
                "invented part; impedance from a shunt-through measurement",
                "with 499 ohm in series at each port",
            ],
        )
    )
    return written


if __name__ == "__main__":
    for path in main():
        print(path.relative_to(HERE.parent))
