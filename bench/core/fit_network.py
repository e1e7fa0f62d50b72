"""A network of ``bench.core.models.network`` compiled for one frequency grid.

The fitter evaluates one circuit on one grid hundreds of times. Every element kind whose
impedance is its value (or its inverse) times a fixed shape of frequency (R: 1, L: jω,
C: 1/jω, the loss ladder S: its ladder shape) is ``Ze = exp(σ·q)·B(ω)`` with
``q`` the log value and ``σ = ±1``; so one broadcast product gives every element's
impedance, and ``σ·Ze`` its derivative in ``q``. The elements of any subtree are
consecutive in :func:`~bench.core.models.network.element_names` order, so series sums run
over slices, and the Jacobian is ``σ·Ze·G`` with ``G`` the product of ``(Z_P/Z_c)²`` over
the parallel groups ``P`` above the element (``c`` the child of ``P`` holding it), the
chain rule of ``Z = 1/ΣYi``. A circuit holding an element kind outside this form is
evaluated by the general tree walk (``impedance_and_jacobian``). No I/O.
"""

from __future__ import annotations

import functools
import math
import threading
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
from numpy.typing import NDArray

from bench.core.models.network import (
    Element,
    Node,
    Parallel,
    Series,
    _constant_phase_parts,
    _element_impedance,
    conductor_slope,
    conductor_terms,
    constant_phase_branches,
    element_names,
    impedance_and_jacobian,
)

# σ of each kind whose impedance is value**σ times a shape of frequency.
_POWER = {"R": 1.0, "L": 1.0, "S": 1.0, "C": -1.0}


@dataclass
class _Group:
    """A series or parallel group: its element rows ``[start, stop)``, the runs of
    element children (row ranges) and the child groups."""

    parallel: bool
    start: int
    stop: int
    runs: list[tuple[int, int]]
    groups: list[_Group]


def _elements(node: Node) -> list[Element]:
    if isinstance(node, Element):
        return [node]
    return [e for part in node.parts for e in _elements(part)]


def _group(node: Series | Parallel, start: int) -> _Group:
    runs: list[tuple[int, int]] = []
    groups: list[_Group] = []
    row = start
    for part in node.parts:
        if isinstance(part, Element):
            if runs and runs[-1][1] == row:
                runs[-1] = (runs[-1][0], row + 1)
            else:
                runs.append((row, row + 1))
            row += 1
        else:
            child = _group(part, row)
            groups.append(child)
            row = child.stop
    return _Group(isinstance(node, Parallel), start, row, runs, groups)


def _is_pair(g: _Group) -> bool:
    """A parallel group of two elements and nothing else (an R‖L or R‖C section)."""
    return g.parallel and not g.groups and g.runs == [(g.start, g.start + 2)]


def _blocks(g: _Group) -> list[list[_Group]]:
    """The children of the series group ``g`` in order, consecutive pairs
    (:func:`_is_pair`) in one block, every other child alone."""
    out: list[list[_Group]] = []
    for child in g.groups:
        if (
            not g.parallel
            and _is_pair(child)
            and out
            and _is_pair(out[-1][-1])
            and out[-1][-1].stop == child.start
        ):
            out[-1].append(child)
        else:
            out.append([child])
    return out


def _walk_source(root: _Group) -> tuple[str, int, int]:
    """Python source of the two walks of the tree ``root`` for :func:`_walkers`, one
    statement per group (children in the order the tree gives them), with the sizes of
    the lists ``zg`` and ``inv`` they fill.

    ``impedance(ze, inv, zg)`` fills ``zg[i]`` with the impedance of group ``i`` (groups
    numbered in pre-order, the root 0) from the element impedances ``ze`` (rows), and
    ``inv`` with the inverses of the runs of elements directly in a parallel group, and
    returns the root's. ``factors(jac, inv, zg)`` multiplies the rows of each element,
    in place, by ``(Z_P/Z_c)²`` for every parallel group ``P`` above it (``c`` its child
    holding the element).

    Consecutive two-element sections of a series group (a ladder's, an inductor's or a
    bead's R‖L and R‖C sections, :func:`_blocks`) are walked together: one inverse of all
    their rows, one sum of each section's two rows and one inverse of the sums, their
    factors in one product; the same operations on every point in the same order, so the
    same values, at a few array operations per block instead of per section."""
    number: dict[int, int] = {}

    def visit(g: _Group) -> None:
        number[id(g)] = len(number)
        for child in g.groups:
            visit(child)

    visit(root)
    z_lines: list[str] = []
    f_lines: list[str] = []
    slots: dict[tuple[int, int], int] = {}  # inverses kept for the factors, by rows
    sections: dict[int, tuple[int, int, int, int, int]] = {}  # a block's, by its first

    def slot(key: tuple[int, int]) -> int:
        slots[key] = len(slots)
        return slots[key]

    def emit(g: _Group) -> None:
        i = number[id(g)]
        for block in _blocks(g):
            if len(block) == 1:
                emit(block[0])
                continue
            s, e = block[0].start, block[-1].stop
            rows, sums = slot((s, e)), slot((e, s))
            sections[id(block[0])] = (s, e, len(block), rows, sums)
            z_lines.append(f"    inv[{rows}] = 1.0 / ze[{s}:{e}]")
            z_lines.append(f"    inv[{sums}] = 1.0 / (inv[{rows}][0::2] + inv[{rows}][1::2])")
            kids = ", ".join(f"zg[{number[id(c)]}]" for c in block)
            z_lines.append(f"    {kids} = inv[{sums}]")
        kids = [f"zg[{number[id(c)]}]" for c in g.groups]
        if g.parallel:
            terms = []
            for s, e in g.runs:
                k = slot((s, e))
                z_lines.append(f"    inv[{k}] = 1.0 / ze[{s}:{e}]")
                terms += [f"inv[{k}][{r}]" for r in range(e - s)]
            terms += [f"1.0 / {kid}" for kid in kids]
            z_lines.append(f"    zg[{i}] = 1.0 / ({' + '.join(terms)})")
        else:
            terms = [f"ze[{r}]" for s, e in g.runs for r in range(s, e)] + kids
            z_lines.append(f"    zg[{i}] = {' + '.join(terms)}")

    def factor(g: _Group) -> None:
        i = number[id(g)]
        if g.parallel:
            for s, e in g.runs:
                f_lines.append(f"    r = zg[{i}] * inv[{slots[s, e]}]")
                f_lines.append(f"    jac[{s}:{e}] *= r * r")
            for child in g.groups:
                f_lines.append(f"    r = zg[{i}] / zg[{number[id(child)]}]")
                f_lines.append(f"    jac[{child.start}:{child.stop}] *= r * r")
        for block in _blocks(g):
            if len(block) == 1:
                factor(block[0])
                continue
            s, e, k, rows, sums = sections[id(block[0])]
            f_lines.append(f"    r = inv[{sums}][:, None] * inv[{rows}].reshape({k}, 2, -1)")
            f_lines.append(f"    jac[{s}:{e}].reshape({k}, 2, -1)[...] *= r * r")

    emit(root)
    factor(root)
    source = "\n".join(
        [
            "def impedance(ze, inv, zg):",
            *z_lines,
            "    return zg[0]",
            "",
            "def factors(jac, inv, zg):",
            *(f_lines or ["    pass"]),
        ]
    )
    return source, len(number), len(slots)


@functools.lru_cache(maxsize=128)
def _walkers(
    node: Series | Parallel,
) -> tuple[Callable[..., Any], Callable[..., Any], int, int]:
    """``(impedance, factors, groups, slots)`` of :func:`_walk_source` for ``node``'s tree
    (``groups`` and ``slots`` the sizes of its ``zg`` and ``inv``), made once per
    circuit: straight-line statements, without the loops, recursion and lookups a walk
    of the tree pays at every step (about half a small circuit's evaluation)."""
    source, groups, slots = _walk_source(_group(node, 0))
    namespace: dict[str, Any] = {}
    exec(compile(source, f"<walk of {type(node).__name__}>", "exec"), namespace)
    return namespace["impedance"], namespace["factors"], groups, slots


class CompiledNetwork:
    """``node`` on the grid ``f`` (Hz): ``impedance(q)`` and ``jacobian(q)`` for the log
    element values ``q`` in :attr:`names` order; ``jacobian`` gives ``dZ/dq`` of shape
    ``(n_values, nf)`` (``p·dZ/dp``), reusing the last ``impedance`` at the same ``q``.

    Elements of a value and a shape (:data:`_POWER`) take one product for all; a ``Q``
    element (a capacitance and its loss tangent: two values, one impedance) evaluates its
    ladder from the branch shapes kept for the grid, a ``K`` element (a resistance and
    its skin corner) its sections at the corner."""

    def __init__(self, node: Node, f: NDArray[np.float64]):
        self.node = node
        self.f = np.asarray(f, dtype=float)
        self.names: tuple[str, ...] = element_names(node)
        elements = _elements(node)
        self.general = any(e.kind not in _POWER and e.kind not in "QK" for e in elements)
        jw = 2j * np.pi * self.f
        self._key = b""
        if self.general:
            return
        # Each element's first value row (a Q element's loss tangent follows it).
        rows, row = [], 0
        for e in elements:
            rows.append(row)
            row += 2 if e.kind in "QK" else 1
        self._power = np.array([i for i, e in enumerate(elements) if e.kind in _POWER], int)
        self._power_rows = np.array([rows[i] for i in self._power], int)
        self._sign = np.array([_POWER[elements[i].kind] for i in self._power])
        self._basis = np.array([_element_impedance(elements[i], jw, 1.0) for i in self._power])
        self._q_slots = []
        for i, e in enumerate(elements):
            if e.kind == "Q":
                u = _constant_phase_parts(0.1, e.band)[0]  # the corners depend on the band only
                branch = constant_phase_branches(jw, u)
                self._q_slots.append((i, rows[i], e.band, branch, jw))
        self._k_slots = [(i, rows[i], e.band, jw) for i, e in enumerate(elements) if e.kind == "K"]
        self._n_elements = len(elements)
        self._walk = None if isinstance(node, Element) else _walkers(node)

    def _values(self, q: NDArray[np.float64]) -> dict[str, float]:
        return dict(zip(self.names, np.exp(q), strict=True))

    def impedance(self, q: NDArray[np.float64]) -> NDArray[np.complex128]:
        """Impedance (Ω) at the log element values ``q``."""
        key = np.asarray(q, dtype=float).tobytes()
        if key == self._key:
            return self._z
        if self.general:
            self._z, self._jac = impedance_and_jacobian(self.node, self.f, self._values(q))
        else:
            q = np.asarray(q, dtype=float)
            if not self._q_slots and not self._k_slots:
                ze = np.exp(self._sign * q[self._power_rows])[:, None] * self._basis
            else:
                ze = np.empty((self._n_elements, self.f.size), dtype=complex)
                ze[self._power] = np.exp(self._sign * q[self._power_rows])[:, None] * self._basis
                # What each Q and K element's slope in its second value is made of: taken
                # only when a Jacobian is asked for (most steps of a solve ask for none).
                self._slope_terms = {}
                for i, row, band, branch, jw in self._q_slots:
                    tan = math.exp(q[row + 1])
                    _, dc, dlog, c_par, dlog_c_par = _constant_phase_parts(tan, band)
                    y = c_par * jw + dc @ branch
                    ze[i] = 1.0 / (math.exp(q[row]) * y)
                    self._slope_terms[i] = (tan, dc, dlog, c_par, dlog_c_par, branch, jw, y)
                for i, row, band, jw in self._k_slots:
                    shape, terms = conductor_terms(jw, math.exp(q[row + 1]), band)
                    ze[i] = math.exp(q[row]) * shape
                    self._slope_terms[i] = (shape, terms)
            self._ze = ze
            if self._walk is None:
                self._z = ze[0]
            else:
                self._inv: list[Any] = [None] * self._walk[3]
                self._zg: list[Any] = [None] * self._walk[2]
                self._z = self._walk[0](ze, self._inv, self._zg)
            self._jac = None
        self._key = key
        return self._z

    def jacobian(self, q: NDArray[np.float64]) -> NDArray[np.complex128]:
        """``dZ/dq`` (``p·dZ/dp`` per value) at the log element values ``q``."""
        self.impedance(q)
        if self._jac is not None:
            return self._jac
        if not self._q_slots and not self._k_slots:
            jac = self._sign[:, None] * self._ze
            if self._walk is not None:
                self._walk[1](jac, self._inv, self._zg)
        else:
            factor = np.ones((self._n_elements, self.f.size), dtype=complex)
            if self._walk is not None:
                self._walk[1](factor, self._inv, self._zg)
            dz = self._ze * factor  # dZ/d ln(element impedance), per element
            jac = np.empty((len(self.names), self.f.size), dtype=complex)
            jac[self._power_rows] = self._sign[:, None] * dz[self._power]
            for i, row, *_ in self._q_slots:
                tan, dc, dlog, c_par, dlog_c_par, branch, jw, y = self._slope_terms[i]
                dy = (c_par * dlog_c_par * jw + (dc * dlog) @ branch) * (
                    (2 / np.pi) * tan / (1 + tan * tan)
                )
                jac[row] = -dz[i]
                jac[row + 1] = -dz[i] * (dy / y)
            for i, row, *_ in self._k_slots:
                shape, terms = self._slope_terms[i]
                jac[row] = dz[i]
                jac[row + 1] = dz[i] * (conductor_slope(terms) / shape)
        self._jac = jac
        return jac


# Networks compiled in this thread, by circuit and grid: a fit compiles the same circuit
# on the same grid for its scouts, its refinement, its robust solve, its covariance and
# its landmarks (a network keeps its last evaluation, so each thread has its own).
_COMPILED = threading.local()
COMPILED_KEPT = 32
# Grids longer than this (a whole long sweep, not a fit's grid) are compiled afresh.
KEEP_POINTS = 8192


def compiled(node: Node, f: Sequence[float] | NDArray[np.float64]) -> CompiledNetwork:
    """``node`` compiled for the grid ``f`` (Hz), the same object again for the same
    circuit and grid in this thread (grids up to :data:`KEEP_POINTS` points)."""
    f = np.asarray(f, dtype=float)
    if f.size > KEEP_POINTS:
        return CompiledNetwork(node, f)  # a long grid's arrays are not kept
    kept = getattr(_COMPILED, "nets", None)
    if kept is None:
        kept = _COMPILED.nets = {}
    key = (node, f.size, hash(f.tobytes()))
    net = kept.get(key)
    if net is None or not np.array_equal(net.f, f):
        if len(kept) >= COMPILED_KEPT:
            kept.clear()
        net = kept[key] = CompiledNetwork(node, f)
    return net


def values_to_q(names: Sequence[str], values: Mapping[str, float]) -> NDArray[np.float64]:
    """Log element values in ``names`` order."""
    return np.log([float(values[n]) for n in names])
