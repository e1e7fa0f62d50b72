"""Landmarks the model gives beyond the sweep carry the uncertainty of the elements they
rest on (docs/references.md §11): a resonance the sweep stops short of is the model's
extrapolation, known only as well as the fit knows the capacitance behind it, and a
landmark resting on an element the data do not see is not determined.

The measurement is a closed-form bead-like network (Rdc in series with R ‖ L ‖ C),
swept a decade and more below its parallel resonance with 0.1 % complex noise, so the
winding capacitance is barely seen.
"""

from __future__ import annotations

import dataclasses
import math
import re

import numpy as np
import pytest

from bench.batch import FileOutcome
from bench.commands.fit import _summary_text
from bench.core.fit_landmarks import landmark_uncertainties, model_landmarks
from bench.core.fit_select import Trial
from bench.core.fitting import fit_impedance
from bench.core.models import FAMILIES
from bench.core.spice import subckt_text

F = np.geomspace(100e3, 1e6, 101)
RDC, R, L, C = 40e-3, 500.0, 1.5e-6, 6e-12
NOISE = 1e-3


def below_resonance(f=F, seed: int = 7):
    w = 2 * np.pi * f
    z = RDC + 1.0 / (1.0 / R + 1.0 / (1j * w * L) + 1j * w * C)
    rng = np.random.default_rng(seed)
    noise = (rng.normal(size=f.size) + 1j * rng.normal(size=f.size)) / np.sqrt(2)
    return z * (1.0 + NOISE * noise)


@pytest.fixture(scope="module", params=["auto", "bead"])
def result(request):
    return fit_impedance(
        F, below_resonance(), model=request.param, rel_uncertainty=np.full(F.size, NOISE)
    )


def _capacitance(result):
    return next(n for n in ("Cp", "C") if n in result.elements)


def test_an_extrapolated_resonance_carries_the_uncertainty_of_its_elements(result):
    srf = result.landmarks["srf"]
    assert result.landmark_sources["srf"] == "model"
    assert not F[0] <= srf <= F[-1]
    sigma = result.landmark_uncertainties["srf"]
    assert sigma is not None and math.isfinite(sigma)
    # First-order propagation for f = 1/(2π√(LC)) (JCGM 100:2008 §5.1.2, docs/references.md
    # §11): σf/f = ½·√((σL/L)² + (σC/C)²); L is known to far better than C here, so
    # their correlation moves this by well under the tolerance.
    cp = _capacitance(result)
    rel_l = result.uncertainties["L"] / result.elements["L"]
    rel_c = result.uncertainties[cp] / result.elements[cp]
    assert rel_l < 0.01 < rel_c
    assert sigma / srf == pytest.approx(0.5 * math.hypot(rel_l, rel_c), rel=0.05)
    # The value at resonance of R ‖ L ‖ C is R whatever C: known as well as R is.
    assert result.landmark_uncertainties["z_at_srf"] == pytest.approx(
        result.uncertainties["R" if "R" in result.elements else "Rp"], rel=0.05
    )


def test_a_dropped_element_does_not_lend_its_freedom_to_the_landmarks(result):
    # The bead fit leaves its core-loss resistor out (the data do not see it); its huge
    # variance must not reach landmarks that do not rest on it.
    for key, value in result.landmarks.items():
        sigma = result.landmark_uncertainties[key]
        if key == "c_par":
            continue  # the barely seen capacitance itself
        assert sigma is not None and sigma < value, key


def _trial(dropped: tuple[str, ...]) -> tuple[Trial, np.ndarray]:
    family = FAMILIES["bead"]
    names = family.element_names(1)
    values = {"Rdc": RDC, "L": L, "R": R, "C": C, "Rc": 1e-7}
    q = np.log([values[n] for n in names])
    trial = Trial(family, 1, family.circuit_for(1, F), values, q, 1.0, 1.0, 0.0, (), ())
    trial = dataclasses.replace(trial, dropped=dropped)
    # Relative one-sigma of 1 % on every element, 10¹⁰ on those that dropped out (what
    # fit_select.covariance gives an element the data leave free).
    rel = np.array([1e10 if n in dropped else 0.01 for n in names])
    return trial, np.diag(rel**2)


def test_a_landmark_resting_on_a_dropped_element_is_not_determined():
    trial, cov = _trial(("C",))
    marks = model_landmarks("inductor", F, trial)
    sigma = landmark_uncertainties(trial, cov, "inductor", F, marks)
    assert marks["srf"] is not None and sigma["srf"] > 1e6 * marks["srf"]
    # R ‖ L ‖ C at resonance is R: it does not rest on C.
    assert sigma["z_at_srf"] == pytest.approx(0.01 * marks["z_at_srf"], rel=0.05)
    trial, cov = _trial(("Rc",))
    sigma = landmark_uncertainties(trial, cov, "inductor", F, model_landmarks("inductor", F, trial))
    # σf/f = ½·√(0.01² + 0.01²) (JCGM 100:2008 §5.1.2).
    assert sigma["srf"] / marks["srf"] == pytest.approx(0.5 * math.hypot(0.01, 0.01), rel=0.05)


def test_the_summary_and_the_subcircuit_say_how_well_a_model_landmark_is_known():
    # Half the sweep: the capacitance is no longer determined (beyond ±100 %).
    f = np.geomspace(100e3, 500e3, 101)
    result = fit_impedance(f, below_resonance(f), rel_uncertainty=np.full(f.size, NOISE))
    outcome = FileOutcome("part.s1p")
    outcome.result = result
    line = next(x for x in _summary_text(outcome).splitlines() if "landmarks:" in x)
    assert re.search(r"srf [0-9.]+ MHz \(model ±[0-9.]+ %\)", line), line
    # The barely seen capacitance's own landmark, beyond ±100 %: not a number to use.
    cp = _capacitance(result)
    assert result.uncertainties[cp] > result.elements[cp]
    assert re.search(r"c_par [0-9.]+ pF \(model, not determined\)", line), line
    spice = subckt_text(result, "BEAD1", provenance={})
    assert re.search(r"srf = [0-9.]+ MHz \(model, \+/- [0-9.]+ %\)", spice), spice
    assert re.search(r"c_par = [0-9.]+ pF \(model, not determined\)", spice), spice
