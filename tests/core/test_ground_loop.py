"""Cable-shield ground-loop model and check, against the derived values of docs/references.md §2."""

from __future__ import annotations

import numpy as np
import pytest

from bench.core.conversions import shunt_through_s21, shunt_through_z
from bench.core.fixture import Mount
from bench.core.ground_loop import check_ground_loop, ground_loop_error

F = np.logspace(2, 8.3, 401)
MOUNT = Mount(r=0.2e-3, l=150e-12)

# From memory (docs/references.md §2): Rsh = 13 mΩ per metre of RG-58; published (Ott 2009):
# fc ≈ 2 kHz for RG-58C.
RSH, FC = 13e-3, 2e3


@pytest.mark.parametrize(
    ("f", "expected"),
    [
        # Derived (docs/references.md §2): |Zerr| = (Rsh/2)/sqrt(1 + (f/fc)^2)
        # = 6.5 mΩ/sqrt(1 + (f/2k)^2).
        (1e-3, 6.5e-3),  # DC: 13/2 mΩ
        (1e3, 5.81e-3),  # 6.5/sqrt(1.25)
        (2e3, 4.60e-3),  # 6.5/sqrt(2)
        (20e3, 0.647e-3),  # 6.5/sqrt(101)
        (100e3, 0.130e-3),  # 6.5/sqrt(2501)
    ],
)
def test_loop_error_check_values(f: float, expected: float) -> None:
    assert abs(ground_loop_error(f, RSH, FC)) == pytest.approx(expected, rel=2e-3)


@pytest.mark.parametrize(("f", "expected"), [(100.0, 268e-6), (1e3, 26.8e-6)])
def test_loop_error_with_a_1_mh_choke(f: float, expected: float) -> None:
    # Derived (docs/references.md §2): R²/|2R + jω(2·Rsh/(2π·fc) + 1 mH)|; at 100 Hz
    # 1.69e-4/|0.026 + j·628.3·1.00207e-3| = 1.69e-4/0.6301 = 268 µΩ.
    assert abs(ground_loop_error(f, RSH, FC, choke_h=1e-3)) == pytest.approx(expected, rel=3e-3)


def test_a_1_milliohm_part_reads_7_5_milliohm_at_dc() -> None:
    # Derived (docs/references.md §2): the 6.5 mΩ DC error lifts a 1 mΩ part to 7.5 mΩ.
    assert (1e-3 + ground_loop_error(0.0, RSH, FC)).real == pytest.approx(7.5e-3)


def _measured(z: np.ndarray, floor_db: float, seed: int) -> np.ndarray:
    rng = np.random.default_rng(seed)
    noise = 10 ** (floor_db / 20) * (rng.normal(size=F.size) + 1j * rng.normal(size=F.size))
    return shunt_through_z(shunt_through_s21(z) + noise / np.sqrt(2))


@pytest.mark.parametrize("floor_db", [-100.0, -120.0])
@pytest.mark.parametrize("seed", [1, 2])
def test_clean_short_is_not_flagged(floor_db: float, seed: int) -> None:
    z = MOUNT.impedance(F)
    # A mount's own skin effect raises Re Z at high frequency; that is not a loop.
    z = z + 0.2e-3 * np.sqrt(np.maximum(F / 1e7, 1.0) - 1.0)
    result = check_ground_loop(F, _measured(z, floor_db, seed))
    assert not result.detected
    assert result.checked
    assert result.valid_above_hz == F[0]
    assert "no ground loop" in result.message
    assert result.l_mount == pytest.approx(150e-12, rel=0.05)


@pytest.mark.parametrize(("rsh", "fc"), [(13e-3, 2e3), (4e-3, 10e3), (2e-3, 30e3)])
def test_loop_of_a_few_milliohm_is_flagged(rsh: float, fc: float) -> None:
    z = MOUNT.impedance(F) + ground_loop_error(F, rsh, fc)
    result = check_ground_loop(F, _measured(z, -110.0, 3))
    assert result.detected
    assert result.excess_r_dc == pytest.approx(rsh / 2, rel=0.05)
    assert result.corner_hz == pytest.approx(fc, rel=0.1)
    # Above valid_above_hz the loop error is below the stated limit of 10 % of the
    # short's own impedance or 20 µΩ, whichever is larger; just below it, it is not.
    fa = result.valid_above_hz
    limit = max(0.1 * abs(MOUNT.impedance(fa)), 20e-6)
    assert abs(ground_loop_error(fa, rsh, fc)) <= limit * 1.01
    assert abs(ground_loop_error(fa * 0.95, rsh, fc)) > max(
        0.1 * abs(MOUNT.impedance(fa * 0.95)), 20e-6
    )
    assert "isolation transformer" in result.message
    assert "ferrite" in result.message
    assert "port-1 lead" in result.message


def test_sweep_starting_too_high_is_not_checked() -> None:
    f = np.logspace(6.5, 8.3, 101)
    result = check_ground_loop(f, MOUNT.impedance(f))
    assert not result.detected
    assert not result.checked
    assert "not checked" in result.message


@pytest.mark.parametrize(("rsh", "fc", "seed"), [(13e-3, 2e3, 1), (1e-3, 10e3, 2), (0.0, 1e3, 3)])
def test_fit_reaches_the_soft_l1_minimum_scipy_finds(rsh: float, fc: float, seed: int) -> None:
    # Reference: scipy's least_squares (trust-region reflective, loss="soft_l1", the same
    # model, bounds and start values) on the same points; the check's own solver must
    # end at a soft-L1 cost no higher, with the same loop where there is one.
    from scipy.optimize import least_squares

    from bench.core.ground_loop import _model, _noise_scale

    loop = ground_loop_error(F, rsh, fc) if rsh else 0.0
    z = _measured(MOUNT.impedance(F) + loop, -110.0, seed)
    result = check_ground_loop(F, z)
    use = F <= 2e6
    fu, zu = F[use], z[use]
    scale = max(_noise_scale(zu.real), _noise_scale(zu.imag), 1e-9)

    def residual(p):
        d = _model(p, fu) - zu
        return np.concatenate([d.real, d.imag]) / scale

    def cost(p):
        r = residual(np.asarray(p, dtype=float))
        return float(np.sum(2 * (np.sqrt(1 + r * r) - 1)))

    top = fu >= np.quantile(fu, 0.6)
    rm0 = max(float(np.median(zu.real[top])), 0.0)
    lm0 = max(float(np.median(zu.imag[top] / (2 * np.pi * fu[top]))), 0.0)
    r00 = max(float(np.median(zu.real[:3])) - rm0, 0.0)
    lo, hi = np.log10(fu[0]) - 1.5, np.log10(fu[-1])
    best = min(
        (
            least_squares(
                residual,
                x0=[rm0, lm0, r00, start],
                bounds=([0.0, 0.0, 0.0, lo], [np.inf, np.inf, np.inf, hi]),
                x_scale=[max(rm0, scale), max(lm0, 1e-15), max(r00, scale), 1.0],
                loss="soft_l1",
            )
            for start in np.linspace(lo + 0.25, hi - 0.25, 6)
        ),
        key=lambda r: r.cost,
    )
    if result.detected:
        ours = [result.r_mount, result.l_mount, result.excess_r_dc, np.log10(result.corner_hz)]
        assert cost(ours) <= cost(best.x) * (1 + 1e-6)
        assert result.excess_r_dc == pytest.approx(best.x[2], rel=1e-3)
        assert result.corner_hz == pytest.approx(10 ** best.x[3], rel=1e-3)
    else:
        assert rsh == 0.0
        assert best.x[2] < 50e-6  # scipy sees no loop above the check's floor either
