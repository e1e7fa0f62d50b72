"""The notebook API: load, impedance (mount, crop, series resistors), fit, export, plot."""

from __future__ import annotations

import shutil
import subprocess
from pathlib import Path

import numpy as np
import pytest
from matplotlib.figure import Figure

from bench import api
from bench.errors import InputError
from bench.touchstone import write_touchstone_s, write_touchstone_z

ROOT = Path(__file__).resolve().parents[2]
EXAMPLES = ROOT / "examples"


def shunt_s2p(path: Path, f: np.ndarray, s21: np.ndarray) -> Path:
    s = np.empty((f.size, 2, 2), dtype=complex)
    s[:, 0, 0] = s[:, 1, 1] = s21 - 1
    s[:, 0, 1] = s[:, 1, 0] = s21
    return write_touchstone_s(path, f, s)


def rlc(f, r=5e-3, l=0.5e-9, c=10e-6):  # noqa: E741
    w = 2 * np.pi * f
    return r + 1j * w * l + 1 / (1j * w * c)


def test_shunt_through_check_values(tmp_path):
    f = np.logspace(3, 8, 20)
    path = shunt_s2p(tmp_path / "half.s2p", f, np.full(f.size, 0.5 + 0j))
    # docs/references.md §1 [derived]: S21 = 0.5 <-> Z = 25 Ω on plain 50 Ω ports,
    # Z = (Z0/2)·S21/(1 − S21) = 25·0.5/0.5 = 25 Ω.
    np.testing.assert_allclose(api.impedance(path).z, 25.0, rtol=1e-12)
    # docs/references.md §1 [derived]: Rs = 450 Ω at each port, S21n = 0.5 <-> Z = 250 Ω,
    # ((50 + 450)/2)·0.5/0.5 = 250 Ω.
    np.testing.assert_allclose(api.impedance(path, series_r="450").z, 250.0, rtol=1e-12)
    np.testing.assert_allclose(api.load(path, series_r=450).z, 250.0, rtol=1e-12)


def test_z_file_and_s_file_of_one_part_agree(tmp_path):
    f = np.logspace(2, 8, 120)
    z = rlc(f)
    s21 = 2 * z / (2 * z + 50.0)  # docs/design.md §4
    from_s = api.impedance(shunt_s2p(tmp_path / "p.s2p", f, s21))
    # A Z file is taken as given unless told the method whose window applies.
    from_z = api.impedance(write_touchstone_z(tmp_path / "p.s1p", f, z), method="shunt-through")
    np.testing.assert_allclose(from_s.z, z, rtol=1e-9)
    np.testing.assert_allclose(from_z.z, z, rtol=1e-9)
    np.testing.assert_array_equal(from_s.inside_window, from_z.inside_window)
    np.testing.assert_allclose(from_s.rel_uncertainty, from_z.rel_uncertainty, rtol=1e-6)


def test_mount_is_subtracted_after_interpolation(tmp_path):
    f = np.logspace(3, 8, 100)
    mount_z = 0.3e-3 + 2j * np.pi * f * 0.1e-9
    z = rlc(f) + mount_z
    part = shunt_s2p(tmp_path / "part.s2p", f, 2 * z / (2 * z + 50.0))
    fm = np.linspace(500.0, 2e8, 300)  # another grid, covering the part's
    zm = 0.3e-3 + 2j * np.pi * fm * 0.1e-9
    mount = shunt_s2p(tmp_path / "mount.s2p", fm, 2 * zm / (2 * zm + 50.0))
    data = api.impedance(part, mount=mount)
    # The mount is linear in f, so linear interpolation is exact up to file rounding.
    np.testing.assert_allclose(data.z, rlc(f), rtol=1e-6, atol=1e-9)
    np.testing.assert_allclose(data.z_measured, z, rtol=1e-9)


def test_crop_keeps_the_points_between_limits():
    data = api.impedance(EXAMPLES / "bulk_330u.s2p", fmin="1 kHz", fmax="10 MHz")
    assert data.f[0] >= 1e3 and data.f[-1] <= 10e6
    full = api.impedance(EXAMPLES / "bulk_330u.s2p")
    assert data.f.size == np.count_nonzero((full.f >= 1e3) & (full.f <= 10e6))
    with pytest.raises(InputError, match="at least"):
        api.crop(full, fmin=1e3, fmax=1.01e3)
    with pytest.raises(InputError, match="not below"):
        api.crop(full, fmin="10 MHz", fmax="1 MHz")


def test_fit_from_path_and_from_data_agree():
    path = EXAMPLES / "inductor_2u2.s2p"
    by_path = api.fit(path, series_r=499)
    by_data = api.fit(api.impedance(api.load(path, series_r=499)))
    assert by_path.model == by_data.model == "inductor"
    assert by_path.landmarks == by_data.landmarks
    # Invented 2.2 µH part of examples/make_examples.py.
    assert by_path.landmarks["l_low"] == pytest.approx(2.2e-6, rel=0.05)


def test_fit_refuses_measurement_options_on_computed_data():
    data = api.impedance(EXAMPLES / "bulk_330u.s2p")
    with pytest.raises(InputError, match=r"api\.impedance"):
        api.fit(data, series_r=499)


def test_fit_refuses_unknown_and_mismatched_models():
    with pytest.raises(InputError, match="unknown model"):
        api.fit(EXAMPLES / "bulk_330u.s2p", model="lumped")
    with pytest.raises(InputError, match=r"bulk_330u\.s2p") as info:
        api.fit(EXAMPLES / "bulk_330u.s2p", model="inductor")
    assert "capacitive" in str(info.value)


def test_export_spice_writes_a_subcircuit(tmp_path):
    result = api.fit(EXAMPLES / "bulk_330u.s2p")
    path = api.export_spice(result, tmp_path / "bulk.sub", "ZBEX-P330U typ")
    text = path.read_text()
    assert ".subckt ZBEX_P330U_typ 1 2" in text and ".ends" in text
    assert "software: zbench" in text


@pytest.mark.ngspice
@pytest.mark.skipif(shutil.which("ngspice") is None, reason="ngspice is not installed")
def test_exported_subcircuit_matches_the_model_in_ngspice(tmp_path):
    result = api.fit(EXAMPLES / "mlcc_22u.s2p", mount=EXAMPLES / "mount_short.s2p")
    sub = api.export_spice(result, tmp_path / "mlcc.sub", "MLCC")
    out = tmp_path / "ac.txt"
    # A 1 A AC current source into pin 1: the node voltage is the impedance (ngspice AC).
    deck = tmp_path / "ac.cir"
    deck.write_text(
        f"api export check\n.include {sub}\nI1 0 1 DC 0 AC 1\nX1 1 0 MLCC\n"
        ".control\nac dec 10 1k 100meg\n"
        f"wrdata {out} v(1)\nquit\n.endc\n.end\n"
    )
    done = subprocess.run(
        ["ngspice", "-n", str(deck)],
        capture_output=True,
        text=True,
        timeout=60,
        stdin=subprocess.DEVNULL,
    )
    assert done.returncode == 0, done.stdout + done.stderr
    table = np.loadtxt(out)
    f, z_spice = table[:, 0], table[:, 1] + 1j * table[:, 2]
    # ngspice solves the same network: agreement to its numeric precision.
    np.testing.assert_allclose(z_spice, result.impedance(f), rtol=1e-6)


def test_plot_returns_figures_in_either_order():
    data = api.impedance(EXAMPLES / "bulk_330u.s2p")
    result = api.fit(data)
    for fig in (api.plot(data), api.plot(data, result), api.plot(result, data)):
        assert isinstance(fig, Figure)
        assert len(fig.axes) == 2
        assert fig.axes[0].get_xscale() == "log" and fig.axes[0].get_yscale() == "log"
    with_model = api.plot(data, result)
    labels = [line.get_label() for line in with_model.axes[0].get_lines()]
    assert "measured" in labels and any(label.startswith("model") for label in labels)
    residuals = api.plot(data, result, residuals=True)
    assert residuals.axes[0].get_ylabel() == "magnitude error (%)"
    with pytest.raises(InputError):
        api.plot(data, residuals=True)
    with pytest.raises(InputError):
        api.plot(result)


def test_a_resonance_beyond_the_sweep_does_not_stretch_the_plot(tmp_path):
    from bench.core.conversions import shunt_through_s21

    # An invented 1 µF capacitor with 0.5 nH and 5 mΩ swept to 1 MHz: its series
    # resonance (7.1 MHz) is the model's extrapolation, stated in a warning, not drawn.
    f = np.geomspace(1e5, 1e6, 101)
    data = api.impedance(shunt_s2p(tmp_path / "c.s2p", f, shunt_through_s21(rlc(f, c=1e-6))))
    result = api.fit(data)
    assert result.landmarks["srf"] > 5e6
    fig = api.plot(data, result)
    for ax in fig.axes:
        lo, hi = ax.get_xlim()
        assert hi < 2e6 and lo > 5e4
        assert not [t for t in ax.texts if t.get_text().startswith("SRF")]
    # One decade is labelled between its ends too (at 2 and 5), not at its ends alone.
    fig.canvas.draw()
    bottom = fig.axes[-1]
    minor = [t.get_text() for t in bottom.xaxis.get_minorticklabels() if t.get_text()]
    assert any("200" in t for t in minor)
