"""Exported subcircuits simulated in ngspice reproduce the fitted model's impedance.

ngspice (an independent circuit simulator) runs an AC analysis with a 1 A AC current
source driving pin 1 of the subcircuit, pin 2 grounded, so V(1) is Z; ``wrdata`` writes
frequency, Re and Im. The operating point must solve first, so a floating node (a model
with no DC path and no bleed) would fail the run.
"""

from __future__ import annotations

import numpy as np
import pytest

from bench.core.fitting import FitQuality, FitResult, fit_impedance
from bench.core.models import FAMILIES
from bench.core.spice import library_text, spice_name, subckt_text
from simulated_instruments.parts import BulkCapacitor, FerriteBead, Mlcc, PowerInductor
from tests.core.ngspice import needs_ngspice, run_ngspice

F = np.logspace(3, np.log10(200e6), 201)
PARTS = {
    "series-rlc": Mlcc(name="MC1U", capacitance=1e-6, mode_c_ratio=0.0, dielectric="C0G"),
    "two-branch": Mlcc(name="MC10U"),
    "ladder": BulkCapacitor(name="PB330"),
    "inductor": PowerInductor(name="PL2U2"),
    "bead": FerriteBead(name="FB600", inductance2=0.4e-6, resistance2=120.0),
}


@needs_ngspice
@pytest.mark.ngspice
@pytest.mark.parametrize("model", sorted(PARTS))
def test_exported_subcircuit_matches_model_in_ngspice(tmp_path, model):
    part = PARTS[model]
    result = fit_impedance(F, part.impedance(F), model=model)
    name = f"{part.name}-s1"
    text = subckt_text(result, name, provenance={"source": "invented part, simulated"})
    f, z_spice = run_ngspice(tmp_path, library_text([text], title="zbench test"), spice_name(name))
    z_model = result.impedance(f)
    assert f.size > 100
    np.testing.assert_allclose(np.abs(z_spice), np.abs(z_model), rtol=1e-3)
    np.testing.assert_allclose(np.angle(z_spice), np.angle(z_model), atol=1e-3)


@needs_ngspice
@pytest.mark.ngspice
def test_library_of_several_parts_runs(tmp_path):
    texts = []
    for model in ("two-branch", "bead"):
        part = PARTS[model]
        result = fit_impedance(F, part.impedance(F), model=model)
        texts.append(subckt_text(result, part.name, provenance={"sample": "s1"}))
    library = library_text(texts, title="two parts")
    f, z = run_ngspice(tmp_path, library, "FB600")
    assert np.all(np.isfinite(f)) and np.all(np.isfinite(z))


def test_subckt_text_carries_landmarks_quality_and_provenance():
    result = fit_impedance(F, PARTS["two-branch"].impedance(F), model="two-branch")
    text = subckt_text(
        result, "MC10U s1 @ 3.3V", provenance={"file": "raw/MC10U_s1.s2p", "note": "two\nlines"}
    )
    lines = text.splitlines()
    assert ".subckt MC10U_s1___3_3V 1 2" in lines
    assert lines[-1] == ".ends MC10U_s1___3_3V"
    comments = [line for line in lines if line.startswith("*")]
    body = [line for line in lines if not line.startswith("*")]
    assert all(line.startswith(("*", ".", "R", "L", "C")) for line in lines)
    assert any("srf" in c and "c_low" in c for c in comments)
    assert any("rms_log_error" in c for c in comments)
    assert any("raw/MC10U_s1.s2p" in c for c in comments)
    assert any("two lines" in c for c in comments)  # newlines in values stay in one comment
    assert sum(1 for line in body if line.split()[0] in result.elements) == len(result.elements)


def test_names_are_sanitised_and_duplicates_refused():
    assert spice_name("10u-0805") == "P_10u_0805"
    assert spice_name("MC22/s2") == "MC22_s2"
    with pytest.raises(ValueError, match="non-empty"):
        spice_name("  ")
    result = fit_impedance(F, PARTS["bead"].impedance(F), model="bead")
    a = subckt_text(result, "FB", provenance={})
    with pytest.raises(ValueError, match="several subcircuits named fb"):
        library_text([a, a], title="dupes")


@needs_ngspice
@pytest.mark.ngspice
@pytest.mark.parametrize(
    ("model", "values"),
    [
        (
            "ladder",
            {
                "R": 8e-3,
                "L": 2e-9,
                "C": 300e-6,
                "R1": 6e-3,
                "C1": 150e-6,
                "R2": 1.5e-3,
                "C2": 150e-6,
                "R3": 0.7e-3,
                "C3": 150e-6,
                "R4": 0.4e-3,
                "C4": 150e-6,
                "R5": 0.25e-3,
                "C5": 150e-6,
            },
        ),
        (
            "inductor",
            {
                "Rdc": 10e-3,
                "L": 1e-6,
                "Rs1": 0.5,
                "Ls1": 20e-9,
                "Rs2": 5.0,
                "Ls2": 5e-9,
                "Rp": 2e3,
                "Cp": 5e-12,
            },
        ),
    ],
    ids=["ladder-5", "inductor-2"],
)
def test_highest_orders_simulate_in_ngspice(tmp_path, model, values):
    # Built directly (not fitted) so that every section of the highest order is present.
    result = FitResult(
        model=model,
        kind=FAMILIES[model].kind,
        elements=values,
        uncertainties={},
        landmarks={},
        quality=FitQuality(0.0, 0.0, 0, 0),
        order=FAMILIES[model].order_of(values),
        f_range=(1e3, 200e6),
    )
    text = subckt_text(result, f"{model}_max", provenance={})
    f, z_spice = run_ngspice(tmp_path, library_text([text], title="orders"), f"{model}_max")
    np.testing.assert_allclose(z_spice, FAMILIES[model].impedance(f, values), rtol=1e-3)
