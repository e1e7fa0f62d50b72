"""A tolerance judged on a value the model gives and the data do not (a bead's |Z| at a
resonance the sweep stops short of) is judged only when the model knows it well
enough: twice its standard uncertainty inside the tolerance (the expanded uncertainty,
coverage factor 2, JCGM 100:2008 §6; docs/references.md §11). Otherwise the verdict is
CHECK, with the reason and the value's uncertainty.

The part is a closed-form bead-like network (Rdc in series with R ‖ L ‖ C) swept from a
decade to well below its parallel resonance, with complex noise of a set relative size.
"""

from __future__ import annotations

import dataclasses

import numpy as np
import pytest

from bench import verdicts
from bench.core.conversions import shunt_through_s21
from bench.core.fitting import fit_impedance
from bench.core.impedance import impedance_from_shunt_through
from bench.results import PartSpec, SampleResult

RDC, R, L, C = 40e-3, 500.0, 1.5e-6, 6e-12
F = np.geomspace(100e3, 1e6, 101)
BEAD = PartSpec("B1", "bead", nominal=500.0, tolerance=0.25)


def bead(f):
    w = 2 * np.pi * f
    return RDC + 1.0 / (1.0 / R + 1.0 / (1j * w * L) + 1j * w * C)


def sample(noise: float, seed: int = 7) -> SampleResult:
    base = impedance_from_shunt_through(F, shunt_through_s21(bead(F), 50.0, 0.0))
    rng = np.random.default_rng(seed)
    scatter = (rng.normal(size=F.size) + 1j * rng.normal(size=F.size)) / np.sqrt(2)
    data = dataclasses.replace(
        base,
        z=bead(F) * (1.0 + noise * scatter),
        rel_uncertainty=np.full(F.size, noise),
        inside_window=np.ones(F.size, bool),
    )
    fit = fit_impedance(data.f, data.z, rel_uncertainty=data.rel_uncertainty)
    return SampleResult("B1", "s1", data, fit)


def test_a_well_known_model_value_is_judged():
    s = sample(1e-3)
    name, relative = verdicts.model_spread(BEAD, s)
    assert name == "z_at_srf" and 2 * relative < BEAD.tolerance
    value = s.fit.landmarks["z_at_srf"]
    assert value == pytest.approx(R, rel=0.05)
    _, verdict = verdicts.judge(BEAD, s, value)
    assert verdict.result == "PASS"


def test_a_loosely_known_model_value_is_not_passed():
    s = sample(3e-2)
    name, relative = verdicts.model_spread(BEAD, s)
    assert name == "z_at_srf" and 2 * relative > BEAD.tolerance
    value = s.fit.landmarks["z_at_srf"]
    deviation, verdict = verdicts.judge(BEAD, s, value)
    # Inside the tolerance by its value alone, but the value is the model's guess.
    assert abs(deviation) < BEAD.tolerance
    assert verdict.result == "CHECK"
    assert "z_at_srf is the model's value" in verdict.reason
    assert f"±{100 * relative:.2g} %" in verdict.reason


def test_a_value_read_from_the_data_is_judged_on_the_data():
    # The inductance is read from the measured points: no model uncertainty comes in.
    spec = PartSpec("L1", "inductor", nominal=1.5e-6, tolerance=0.2)
    s = sample(3e-2)
    assert verdicts.landmark_sources(s, "inductor")["l_low"] == "data"
    assert verdicts.model_spread(spec, s) is None
    _, verdict = verdicts.judge(spec, s, verdicts.shown_landmarks(s, "inductor")["l_low"])
    assert verdict.result == "PASS"


def test_a_model_landmark_known_to_worse_than_100_percent_is_not_shown():
    # At 2 % noise the winding capacitance drops out of the fit: the model's resonance
    # rests on its placeholder value and is known to worse than ±100 %.
    s = sample(2e-2)
    sigma = s.fit.landmark_uncertainties["srf"]
    assert s.fit.landmarks["srf"] is not None and sigma > s.fit.landmarks["srf"]
    values, sources = verdicts.shown(s, "inductor")
    assert values["srf"] is None and sources["srf"] == verdicts.NOT_DETERMINED
    # What the data give is shown as ever.
    assert sources["l_low"] == "data" and values["l_low"] == pytest.approx(L, rel=0.02)


def test_a_part_with_a_tolerance_and_no_value_to_judge_is_checked():
    s = sample(1e-3)
    _, verdict = verdicts.judge(BEAD, s, None)
    assert verdict.result == "CHECK" and "no value to judge" in verdict.reason
    # At a DC-bias point nothing is judged against the nominal value anyway.
    biased = dataclasses.replace(s, bias_v=2.0)
    assert verdicts.judge(BEAD, biased, None)[1].result == ""
