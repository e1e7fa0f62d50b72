"""The fitter's compiled networks (bench/core/fit_network.py) against the general tree
walk of bench/core/models/network.py, for every family and order the fitter tries and
for circuits of other shapes: the impedance and the Jacobian in the log element values.

The reference is the project's own tree walk (itself checked against closed forms and
ngspice in tests/core/test_models.py and test_loss_elements.py), and the Jacobian is
also checked against central differences [derived: the definition of the derivative].
"""

from __future__ import annotations

import numpy as np
import pytest

from bench.core.fit_network import CompiledNetwork, _blocks, _group, values_to_q
from bench.core.models import FAMILIES
from bench.core.models.network import (
    C,
    L,
    R,
    element_names,
    impedance_and_jacobian,
    parallel,
    series,
)

F = np.geomspace(1e3, 2e8, 97)


def _values(names, seed):
    """Element values spread over a few decades around typical sizes (the kind is the
    name's first letter; a loss tangent and a corner have their own names)."""
    rng = np.random.default_rng(seed)
    typical = {"R": 0.05, "L": 1e-8, "C": 1e-7, "S": 1e-3, "t": 0.03, "f": 3e6}
    return {n: typical.get(n[0], 0.1) * 10 ** rng.uniform(-1, 1) for n in names}


def _check(node, seed=0):
    net = CompiledNetwork(node, F)
    values = _values(net.names, seed)
    q = values_to_q(net.names, values)
    z, jac = net.impedance(q).copy(), net.jacobian(q).copy()
    z_tree, jac_tree = impedance_and_jacobian(node, F, values)
    np.testing.assert_allclose(z, z_tree, rtol=1e-12)
    scale = np.abs(z)
    np.testing.assert_allclose(jac, jac_tree, rtol=1e-9, atol=1e-12 * scale.max())
    for i in range(q.size):
        step = np.zeros_like(q)
        step[i] = 1e-6
        numeric = (net.impedance(q + step) - net.impedance(q - step)) / 2e-6
        np.testing.assert_allclose(numeric, jac[i], rtol=1e-5, atol=1e-7 * scale.max())
    return net


def _family_orders():
    return [(name, order) for name, family in FAMILIES.items() for order in family.orders]


@pytest.mark.parametrize(("name", "order"), _family_orders())
def test_every_family_and_order_compiles_to_the_tree_walk(name, order):
    node = FAMILIES[name].circuit_for(order, F)
    net = _check(node, seed=order)
    assert net.names == element_names(node)


@pytest.mark.parametrize(
    "node",
    [
        # sections at the start, in the middle and at the end of a series group
        series(parallel(R("Ra"), L("La")), parallel(R("Rb"), C("Cb")), R("R0"), L("L0")),
        series(R("R0"), parallel(R("Ra"), L("La")), L("L0"), parallel(R("Rb"), L("Lb"))),
        series(
            R("R0"),
            parallel(R("Ra"), L("La")),
            parallel(R("Rb"), L("Lb")),
            parallel(R("Rc"), L("Lc"), C("Cc")),  # three elements: not a section
            parallel(R("Rd"), C("Cd")),
            parallel(R("Re"), C("Ce")),
        ),
        # sections inside a parallel group are walked one by one
        parallel(parallel(R("Ra"), L("La")), parallel(R("Rb"), L("Lb")), C("Cp")),
        # blocks of sections nested in branches of a parallel group
        parallel(
            series(R("R1"), parallel(R("Ra"), L("La")), parallel(R("Rb"), L("Lb"))),
            series(C("C2"), parallel(R("Rc"), C("Cc")), parallel(R("Rd"), C("Cd"))),
            R("Rp"),
        ),
    ],
)
def test_circuits_of_other_shapes_compile_to_the_tree_walk(node):
    _check(node)


def test_consecutive_sections_make_one_block():
    node = series(
        R("R0"),
        parallel(R("Ra"), L("La")),
        parallel(R("Rb"), L("Lb")),
        L("L0"),
        parallel(R("Rc"), L("Lc")),
        parallel(R("Rd"), L("Ld"), C("Cd")),
    )
    sizes = [len(block) for block in _blocks(_group(node, 0))]
    assert sizes == [2, 1, 1]  # the element between them ends the first block
    assert not any(len(b) > 1 for b in _blocks(_group(parallel(series(R("a"), L("b")), C("c")), 0)))


def test_an_evaluation_is_kept_for_its_point_and_renewed_for_another():
    node = FAMILIES["inductor"].circuit_for(3, F)
    net = CompiledNetwork(node, F)
    q = values_to_q(net.names, _values(net.names, 3))
    z1 = net.impedance(q)
    assert net.impedance(q.copy()) is z1
    z2 = net.impedance(q + 0.1)
    z_tree, _ = impedance_and_jacobian(node, F, dict(zip(net.names, np.exp(q + 0.1), strict=True)))
    np.testing.assert_allclose(z2, z_tree, rtol=1e-12)
    _, jac_tree = impedance_and_jacobian(node, F, dict(zip(net.names, np.exp(q), strict=True)))
    np.testing.assert_allclose(net.jacobian(q), jac_tree, rtol=1e-9, atol=1e-12 * np.abs(z1).max())
