"""The live result line: fits an 80-column console, no verdict under DC bias."""

from __future__ import annotations

import io

import numpy as np
import pytest
from rich.console import Console

from bench.procedure.display import RichDisplay, fit_width, label_bias, result_line

MLCC = {"c_low": 3.62e-6, "esl": 323e-12, "srf": 4.17e6, "esr_at_srf": 3.98e-3}


def test_verdict_at_zero_volts_against_nominal_and_tolerance():
    inside = result_line("MC4U7-10V/s1", "mlcc", MLCC, nominal=3.5e-6, tolerance=0.1)
    # (3.62 / 3.5 − 1) = +3.4 %, within ±10 % (derived: 0.12 / 3.5 = 0.0343)
    assert "+3.4 % vs nominal, inside ±10 %" in inside
    outside = result_line("MC4U7-10V/s1", "mlcc", MLCC, nominal=4.7e-6, tolerance=0.1)
    # (3.62 / 4.7 − 1) = −23.0 % (derived: −1.08 / 4.7 = −0.2298)
    assert "-23.0 % vs nominal, OUTSIDE ±10 %" in outside


def test_no_verdict_under_bias_but_the_change_from_zero_volts():
    # The exports give no verdict at a bias point (a nominal value is stated without
    # bias); the live line must agree.
    line = result_line(
        "MC4U7-10V/s1 2.5V", "mlcc", MLCC, nominal=4.7e-6, tolerance=0.1, reference=4.49e-6
    )
    assert "OUTSIDE" not in line and "inside" not in line
    # 3.62 / 4.49 − 1 = −19.4 % (derived: −0.87 / 4.49 = −0.1938)
    assert "-19.4 % vs 0 V, no verdict under bias" in line
    # Without the 0 V value, and with the bias read from the label (fit lines): nothing
    # in place of a verdict, so the line stays one line.
    line = result_line("fit MC4U7-10V_s1_2.5V", "mlcc", MLCC, nominal=4.7e-6, tolerance=0.1)
    assert "%" not in line and "OUTSIDE" not in line and len(line) <= 80
    # An explicit bias_v wins over the label.
    line = result_line("X/s1", "mlcc", MLCC, nominal=4.7e-6, tolerance=0.1, bias_v=5.0)
    assert "vs nominal" not in line


def test_label_bias_reads_only_a_trailing_bias():
    assert label_bias("MC4U7-10V/s1 2.5V") == 2.5
    assert label_bias("MC4U7-10V_s2_10V") == 10.0
    assert label_bias("MC4U7-10V/s1") == 0.0  # the part's rating is not a bias
    assert label_bias("fit MC4U7-10V_s1") == 0.0


def test_points_outside_the_window_singular_and_plural():
    one = result_line("A/s1", "mlcc", MLCC, nominal=None, tolerance=None, outside=1)
    many = result_line("A/s1", "mlcc", MLCC, nominal=None, tolerance=None, outside=7)
    assert "(1 point outside the window)" in one
    assert "(7 points outside the window)" in many


def test_long_lines_fold_between_fields_within_80_columns():
    line = (
        result_line("fit MC4U7-10V_s1", "mlcc", MLCC, nominal=4.7e-6, tolerance=0.1)
        + "  [two-branch, rms 0.035]"
    )
    folded = fit_width(line, 80).split("\n")
    assert len(folded) == 2 and all(len(row) <= 80 for row in folded)
    # Values stay whole ("C 3.62 µF"), the verdict moves to an indented second line.
    assert folded[0].rstrip().endswith("ESR 3.98 mΩ")
    assert folded[1] == "    -23.0 % vs nominal, OUTSIDE ±10 %  [two-branch, rms 0.035]"
    # Right-aligned values ("C  4.5 µF") are never split from their key.
    padded = result_line(
        "A/s1", "mlcc", {"c_low": 4.5e-6, "srf": 28e6}, nominal=4.7e-6, tolerance=0.1
    )
    for width in range(30, 80):
        for row in fit_width(padded, width).split("\n"):
            assert not row.strip()[:1].isdigit() and not row.strip().startswith("—")
    # A sentence without fields folds between words, a number never parted from its unit.
    took = (
        "took 5.7 s (estimated 7.4 s): instruments 1.4 s (estimated 3.5 s), operator "
        "0.05 s (estimated 0.00 s), fit and report 4.1 s"
    )
    for width in range(30, 80):
        rows = fit_width(took, width).split("\n")
        assert " ".join(row.strip() for row in rows) == took
        assert all(len(row) <= width for row in rows)
        assert not any(row.strip()[:1] in "s)" or row.rstrip()[-1].isdigit() for row in rows)
    # One long word has nowhere to fold: left to the console.
    assert fit_width("x" * 50, 40) == "x" * 50


def test_rich_display_prints_folded_lines_at_the_console_width():
    buffer = io.StringIO()
    display = RichDisplay(Console(file=buffer, width=80, color_system=None))
    display.result(
        result_line(
            "MC4U7-10V/s1 2.5V",
            "mlcc",
            MLCC,
            nominal=4.7e-6,
            tolerance=0.1,
            outside=11,
            reference=4.49e-6,
        )
    )
    rows = buffer.getvalue().rstrip("\n").split("\n")
    assert len(rows) == 2 and all(len(row) <= 80 for row in rows)
    assert rows[1] == "    -19.4 % vs 0 V, no verdict under bias  (11 points outside the window)"


def test_a_bead_is_judged_on_its_impedance_at_the_stated_frequency():
    line = result_line(
        "FB137/s1",
        "bead",
        {"r_dc": 0.0355, "l_low": 248e-9},
        nominal=120.0,
        tolerance=0.25,
        z_at_nominal=131.0,
        nominal_at_hz=100e6,
    )
    assert "|Z|@100MHz   131 Ω" in line
    # 131 / 120 − 1 = +9.2 % (derived: 11 / 120 = 0.0917)
    assert "+9.2 % vs nominal, inside ±25 %" in line
    assert all(len(row) <= 80 for row in fit_width(line, 80).split("\n"))
    # Without |Z| at the frequency, no verdict is made up from the other landmarks.
    plain = result_line("FB137/s1", "bead", {"l_low": 248e-9}, nominal=120.0, tolerance=0.25)
    assert "nominal" not in plain


def test_the_live_line_reads_past_a_lone_glitch_with_only_noise_beside_it():
    """An invented 1 µH inductor (10 mΩ winding) swept from 100 Hz by a set-up whose
    window starts near 50 kHz; below it the readings are noise (u = 9), and a glitch at
    300 Hz reads 0.07 + 0.22j Ω inside the window (inductive, as one did on the
    glitching demo bench). The live line, made before any fit, must read neither the
    winding's resistance nor the inductance from it."""
    from types import SimpleNamespace

    from bench.procedure.steps.live import part_landmarks

    f = np.geomspace(100.0, 2e8, 201)
    w = 2 * np.pi * f
    z = 1 / (1 / (10e-3 + 1j * w * 1e-6) + 1j * w * 3e-12)
    lone = int(np.argmin(np.abs(f - 300.0)))
    z[lone] = 0.07 + 0.22j
    inside = (f > 5e4) | (np.arange(f.size) == lone)
    data = SimpleNamespace(z=z, inside_window=inside, rel_uncertainty=np.where(inside, 0.005, 9.0))
    part = SimpleNamespace(spec=SimpleNamespace(kind="inductor"))
    marks = part_landmarks(part, f, data)
    # Noise-free above 50 kHz, the winding's 10 mΩ shows in Re Z there; not the glitch's.
    assert marks["r_dc"] == pytest.approx(10e-3, rel=0.05)
    # An inductor's low-frequency inductance is Im Z / ω (handbook definition).
    assert marks["l_low"] == pytest.approx(1e-6, rel=0.03)
