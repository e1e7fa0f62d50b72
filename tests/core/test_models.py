"""Model families: impedance against hand-written formulas, analytic Jacobians, passivity,
DC paths and SPICE element lines."""

from __future__ import annotations

import numpy as np
import pytest

from bench.core.models import FAMILIES, MODEL_NAMES, get_family
from bench.core.models.network import (
    BLEED_RESISTANCE,
    has_dc_path,
    impedance_and_jacobian,
    vanishing_sides,
)

F = np.logspace(2, 9, 97)
W = 2 * np.pi * F


def zr(r):
    return np.full(F.shape, r, dtype=complex)


def zl(x):
    return 1j * W * x


def zc(x):
    return 1 / (1j * W * x)


def par(*zs):
    return 1 / sum(1 / z for z in zs)


# Element values (invented) and the impedance written out by hand for each family/order.
CASES = [
    (
        "series-rlc",
        {"R": 5e-3, "L": 0.5e-9, "C": 10e-6},
        lambda v: zr(v["R"]) + zl(v["L"]) + zc(v["C"]),
    ),
    (
        "two-branch",
        {"R1": 3e-3, "L1": 0.5e-9, "C1": 10e-6, "R2": 30e-3, "L2": 2e-9, "C2": 30e-9},
        lambda v: par(
            zr(v["R1"]) + zl(v["L1"]) + zc(v["C1"]), zr(v["R2"]) + zl(v["L2"]) + zc(v["C2"])
        ),
    ),
    (
        "ladder",
        {"R": 8e-3, "L": 2e-9, "C": 300e-6, "R1": 6e-3, "C1": 150e-6, "R2": 1.5e-3, "C2": 150e-6},
        lambda v: (
            zr(v["R"])
            + zl(v["L"])
            + zc(v["C"])
            + par(zr(v["R1"]), zc(v["C1"]))
            + par(zr(v["R2"]), zc(v["C2"]))
        ),
    ),
    (
        "inductor",
        {"Rdc": 10e-3, "L": 1e-6, "Rs1": 0.5, "Ls1": 20e-9, "Rp": 2e3, "Cp": 5e-12},
        lambda v: par(
            zr(v["Rdc"]) + zl(v["L"]) + par(zr(v["Rs1"]), zl(v["Ls1"])), zr(v["Rp"]), zc(v["Cp"])
        ),
    ),
    (
        "inductor",
        {"Rdc": 10e-3, "L": 1e-6, "Rp": 2e3, "Cp": 5e-12},
        lambda v: par(zr(v["Rdc"]) + zl(v["L"]), zr(v["Rp"]), zc(v["Cp"])),
    ),
    (
        "bead",
        {"Rdc": 40e-3, "L": 1.2e-6, "R": 600.0, "C": 1e-12, "Rc": 30.0},
        lambda v: zr(v["Rdc"]) + par(zl(v["L"]), zr(v["R"]), zc(v["C"]) + zr(v["Rc"])),
    ),
    (
        "bead",
        {"Rdc": 40e-3, "L": 1.2e-6, "R": 600.0, "C": 1e-12, "Rc": 30.0, "L2": 0.3e-6, "R2": 100.0},
        lambda v: (
            zr(v["Rdc"])
            + par(zl(v["L"]), zr(v["R"]), zc(v["C"]) + zr(v["Rc"]))
            + par(zl(v["L2"]), zr(v["R2"]))
        ),
    ),
]
IDS = [f"{c[0]}-{len(c[1])}" for c in CASES]


def test_registry_has_the_design_names():
    # docs/design.md §3 names the families; "auto" is the fitter's choice among them.
    # lossy-rlc is the series R-L-C with loss across the band (docs/references.md §9).
    assert set(MODEL_NAMES) == {
        "series-rlc",
        "lossy-rlc",
        "two-branch",
        "ladder",
        "inductor",
        "bead",
        "auto",
    }
    capacitors = ("series-rlc", "lossy-rlc", "two-branch", "ladder")
    assert {FAMILIES[n].kind for n in capacitors} == {"capacitor"}
    assert {FAMILIES[n].kind for n in ("inductor", "bead")} == {"inductor"}
    with pytest.raises(KeyError, match="choose one of"):
        get_family("spline")


@pytest.mark.parametrize(("name", "values", "formula"), CASES, ids=IDS)
def test_impedance_matches_hand_formula(name, values, formula):
    family = FAMILIES[name]
    z = family.impedance(F, values)
    np.testing.assert_allclose(z, formula(values), rtol=1e-12)


@pytest.mark.parametrize(("name", "values", "formula"), CASES, ids=IDS)
def test_analytic_jacobian_matches_finite_differences(name, values, formula):
    family = FAMILIES[name]
    order = family.order_of(values)
    node = family.circuit(order)
    z, jac = impedance_and_jacobian(node, F, values)
    names = family.element_names(order)
    assert jac.shape == (len(names), F.size)
    h = 1e-6
    for i, key in enumerate(names):
        up = dict(values, **{key: values[key] * np.exp(h)})
        down = dict(values, **{key: values[key] * np.exp(-h)})
        numeric = (family.impedance(F, up) - family.impedance(F, down)) / (2 * h)
        # Compared as d ln Z / d ln p, the quantity the fitter uses.
        assert np.max(np.abs(jac[i] - numeric) / np.abs(z)) < 1e-7, key


# Decades of random element values by kind letter (S in Ω at 1 MHz).
RANDOM_DECADES = {
    "R": (-4, 3),
    "L": (-10, -5),
    "C": (-12, -3),
    "S": (-4, 0),
    "t": (-4, -0.2),  # a Q element's loss tangent
    "f": (2, 8),  # a K element's skin corner (Hz)
}


@pytest.mark.parametrize("name", sorted(FAMILIES))
def test_every_order_is_passive_for_random_positive_values(name):
    # A network of positive R, L and C is passive: Re Z >= 0 at every frequency.
    family = FAMILIES[name]
    rng = np.random.default_rng(5)
    for order in family.orders:
        for _ in range(20):
            values = {
                n: float(10 ** rng.uniform(*RANDOM_DECADES[n[0]]))
                for n in family.element_names(order)
            }
            z = family.impedance(F, values)
            assert np.all(z.real >= -1e-12 * np.abs(z))


@pytest.mark.parametrize("name", sorted(FAMILIES))
def test_element_names_are_spice_ready_and_unique(name):
    family = FAMILIES[name]
    for order in family.orders:
        names = family.element_names(order)
        assert len(set(n.lower() for n in names)) == len(names)
        # R, L, C are SPICE elements; S, Q and K become ladders of them (tan<name> is
        # the loss tangent of a Q element, fc<name> the corner of a K element: values,
        # not elements).
        assert all(n[0] in "RLCDSQK" or n.startswith(("tan", "fc")) for n in names)
        assert family.order_of(dict.fromkeys(names, 1.0)) == order
        lines = family.spice_lines(dict.fromkeys(names, 1e-6))
        tokens = [line.split()[0] for line in lines]
        assert all(t[0] in "RLC" for t in tokens)
        assert len(set(t.lower() for t in tokens)) == len(tokens)


def test_impedance_refuses_zero_frequency():
    with pytest.raises(ValueError, match="above 0 Hz"):
        FAMILIES["series-rlc"].impedance(np.array([0.0, 1e3]), {"R": 1.0, "L": 1e-9, "C": 1e-6})


def test_order_of_rejects_foreign_elements():
    with pytest.raises(ValueError, match="match no order"):
        FAMILIES["ladder"].order_of({"R": 1.0, "L": 1.0})


@pytest.mark.parametrize(("name", "values", "formula"), CASES, ids=IDS)
def test_spice_lines_and_dc_path(name, values, formula):
    family = FAMILIES[name]
    lines = family.spice_lines(values)
    node = family.circuit(family.order_of(values))
    elements = [line.split() for line in lines]
    # Every element named, between two nodes, with its value.
    for key, value in values.items():
        match = [e for e in elements if e[0] == key]
        assert len(match) == 1
        assert float(match[0][3]) == pytest.approx(value, rel=1e-8)
    nodes = {n for e in elements for n in e[1:3]}
    assert {"1", "2"} <= nodes
    bleed = [e for e in elements if e[0] == "Rbleed"]
    if family.kind == "capacitor":
        # Every branch of a capacitor model holds a capacitor: no DC path without a bleed.
        assert not has_dc_path(node)
        assert len(bleed) == 1
        assert float(bleed[0][3]) == BLEED_RESISTANCE
        assert bleed[0][1:3] == ["1", "2"]
    else:
        assert has_dc_path(node)
        assert not bleed
    # Each internal node joins at least two elements (none left dangling).
    for n in nodes - {"1", "2"}:
        assert sum(n in e[1:3] for e in elements) >= 2


def test_vanishing_sides():
    sides = vanishing_sides(FAMILIES["bead"].circuit(2))
    assert sides["Rdc"] == {"low"}  # a series resistor drops out as a short
    assert sides["R"] == {"high", "low"}  # in a group in series: as an open or a short
    assert sides["C"] == {"low", "high"}
    assert vanishing_sides(FAMILIES["series-rlc"].circuit(1))["C"] == {"high"}
    # Across the whole inductor, a shorting Cp or Rp would short the part: not harmless.
    sides = vanishing_sides(FAMILIES["inductor"].circuit(1))
    assert sides["Cp"] == {"low"}
    assert sides["Rp"] == {"high"}
    assert sides["Rs1"] == {"high", "low"}  # the R-L section sits in series in the winding


@pytest.mark.parametrize("name", sorted(FAMILIES))
def test_starts_are_inside_bounds_for_plain_landmarks(name):
    family = FAMILIES[name]
    f = np.logspace(3, 8, 50)
    marks = (
        {"c_low": 1e-6, "esl": 1e-9, "srf": 5e6, "esr_at_srf": 5e-3}
        if family.kind == "capacitor"
        else {"l_low": 1e-6, "r_dc": 1e-2, "srf": 5e7, "z_at_srf": 500.0, "c_par": 1e-11}
    )
    z = np.full(f.shape, 1.0 + 0.1j)
    for order in family.orders:
        bounds = family.element_bounds(order, f, marks)
        starts = family.starts(order, f, z, marks, None)
        assert starts
        for start in starts:
            assert set(start) == set(family.element_names(order))
            for key, value in start.items():
                assert bounds[key][0] < value < bounds[key][1], (order, key, value)


def test_schema_api_and_auto_read_the_one_registry():
    from bench import api
    from bench.core.model_registry import FAMILY_NAMES, REGISTRY, auto_candidates
    from bench.procedure.schema import MODEL_NAMES as SCHEMA_NAMES

    assert set(SCHEMA_NAMES) == set(MODEL_NAMES) == {*FAMILY_NAMES, "auto"}
    assert api.model_kinds() == {e.name: e.kind for e in REGISTRY}
    assert set(api.MODEL_NAMES) == set(MODEL_NAMES)
    for entry in REGISTRY:
        assert FAMILIES[entry.name].kind == entry.kind
        assert set(entry.auto_orders) <= set(FAMILIES[entry.name].orders)
    tried = {name for kind in ("capacitor", "inductor") for name, _ in auto_candidates(kind)}
    assert tried == set(FAMILY_NAMES)
