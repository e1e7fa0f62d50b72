"""Wording of fit warnings and SPICE comments.

Warnings give values with SI prefixes and units (``1.5 mΩ``, ``47.96 MHz``), never raw
floats or "ohm". SPICE files are plain ASCII throughout (some SPICE readers reject any
other byte, even in a comment): ``uF``, ``mOhm``, ``+/-``; element values stay in a
notation every SPICE reads.
"""

from __future__ import annotations

import re

import numpy as np
import pytest

from bench.core.fitting import fit_impedance
from bench.core.impedance import impedance_from_shunt_through
from bench.core.spice import ascii_text, subckt_text
from simulated_instruments.parts import BulkCapacitor, PowerInductor

RAW_FLOAT = re.compile(r"\d\.\d+e[+-]\d+")


def winding_behind_resistors():
    """An invented 470 nH inductor with a 1.5 mΩ winding, measured behind 499 Ω port
    resistors: the winding lies below the window, so r_dc is the model's."""
    part = PowerInductor(name="PL470X", inductance=470e-9, r_dc=1.5e-3, winding_capacitance=2e-12)
    f = np.logspace(3, np.log10(200e6), 301)
    rng = np.random.default_rng(7)
    ze = 50.0 + 499.0
    z = part.impedance(f)
    s21 = 2 * z / (2 * z + ze)  # docs/design.md §4
    noise = rng.standard_normal(f.size) + 1j * rng.standard_normal(f.size)
    s21 = s21 * (1 + 1.2e-3 * noise / np.sqrt(2))
    s21 = s21 + 10 ** (-99 / 20) / np.sqrt(2) * (
        rng.standard_normal(f.size) + 1j * rng.standard_normal(f.size)
    )
    data = impedance_from_shunt_through(
        f, s21, series_r=499.0, noise_floor_db=-99.0, trace_noise_db=0.01
    )
    return fit_impedance(
        data.f,
        data.z,
        model="inductor",
        rel_uncertainty=data.rel_uncertainty,
        valid=data.inside_window,
    )


@pytest.fixture(scope="module")
def inductor_fit():
    return winding_behind_resistors()


def test_warnings_use_si_prefixes_and_the_ohm_sign(inductor_fit):
    notes = [w for w in inductor_fit.warnings if w.startswith("r_dc")]
    assert notes, inductor_fit.warnings
    assert re.search(r"r_dc \(\d+(\.\d+)? [mµ]?Ω\)", notes[0]), notes[0]
    for warning in inductor_fit.warnings:
        assert "ohm)" not in warning and " ohm " not in warning, warning
        assert not RAW_FLOAT.search(warning), warning
    # A frequency in a warning carries its prefix: "near 10.23 MHz", not "near 1.023e+07 Hz".
    freqs = re.findall(r"(\d+(?:\.\d+)?) ([kMG]?)Hz", " ".join(inductor_fit.warnings))
    assert freqs
    assert all(float(value) < 1000 for value, _ in freqs)


def test_spice_comments_are_plain_ascii(inductor_fit):
    text = subckt_text(
        inductor_fit,
        "PL470X-s1",
        provenance={"fixture": "pads 0.25 pF ± 8 %, Rs 499 Ω", "by": "Zoë"},
    )
    assert text.isascii(), [line for line in text.splitlines() if not line.isascii()]
    comments = [line for line in text.splitlines() if line.startswith("*")]
    joined = "\n".join(comments)
    assert re.search(r"l_low = 4[67]\d(\.\d+)? nH", joined), joined
    assert "mOhm" in joined and "MHz" in joined and "kOhm" in joined
    assert "+/-" in joined
    assert "pads 0.25 pF +/- 8 %, Rs 499 Ohm" in joined
    assert "by: Zoe" in joined
    assert "of an inductor" in comments[0]
    # Element lines: name, two nodes, a number Python (and SPICE) reads without a suffix.
    body = text.split(".subckt", 1)[1].splitlines()[1:-1]
    for line in body:
        fields = line.split()
        assert len(fields) == 4 and float(fields[3]) > 0, line


def test_capacitor_comments_spell_microfarads():
    part = BulkCapacitor(name="PB47X", capacitance=47e-6, line_resistance=20e-3, esr=10e-3)
    f = np.logspace(2, 8, 201)
    result = fit_impedance(f, part.impedance(f), model="ladder")
    text = subckt_text(result, "PB47X", provenance={})
    assert text.isascii()
    assert re.search(r"c_low = 4[67](\.\d+)? uF", text), text
    assert "of a capacitor" in text


@pytest.mark.parametrize(
    ("given", "expected"),
    [
        ("4.7 µF", "4.7 uF"),
        ("1.5 mΩ ± 2 %", "1.5 mOhm +/- 2 %"),
        ("L ‖ R, −3 dB", "L || R, -3 dB"),
        ("café", "cafe"),
        ("☃", "?"),
    ],
)
def test_ascii_text_spells_units(given, expected):
    assert ascii_text(given) == expected
