"""Two-terminal R-L-C networks with analytic derivatives, and the model-family frame.

A model family describes its circuit as a tree of series and parallel groups of
positive R, L and C elements. From that one description come the impedance, its
derivatives with respect to the logarithm of every element value (what the fitter needs)
and the SPICE element lines. Positive elements make every model passive by construction.

Derivatives in log space: for an element of value p, ``p·dZe/dp`` is ``+Ze`` for R and L
and ``-Ze`` for C. In series the derivatives add; in a parallel group
``dZ = (Z/Zi)^2 · dZi`` (from ``Z = 1/ΣYi``).
"""

from __future__ import annotations

import functools
import math
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass
from typing import Any, Union

import numpy as np
from numpy.typing import NDArray

from bench.core.models.conductor import (  # noqa: F401 - the conductor's names, re-exported
    CONDUCTOR_PER_DECADE,
    _conductor_parts,
    _conductor_shape,
    conductor_continuum,
    conductor_ladder,
    conductor_slope,
    conductor_terms,
)

ComplexArray = NDArray[np.complex128]

# A bleed resistor across a network with no DC path (every branch holds a capacitor), so
# that ngspice finds an operating point. At 1e12 Ω it changes the impedance of a 1 pF
# capacitor at 1 kHz (160 MΩ) by under 0.02 %, and of anything bigger by less.
BLEED_RESISTANCE = 1e12


@dataclass(frozen=True)
class Element:
    """One element; ``name`` starts with its kind letter (``R1``, ``Lk1``, ``Cp``).

    Kinds ``R``, ``L``, ``C`` are the ideal parts. The others (docs/references.md §9)
    describe a loss spread
    over a band ``band = (f_lo, f_hi)`` (Hz). Each is a ladder of ideal parts with
    :data:`LADDER_PER_DECADE` sections per decade (:func:`skin_ladder`,
    :func:`constant_phase_ladder`): the model is that ladder, the SPICE export writes it out, and
    the continuous forms below are its limit (:func:`skin_continuum`,
    :func:`constant_phase_continuum`), within about 1 % inside the band:

    - ``S`` (value in Ω): conductor (skin) loss, resistance rising as √f, the limit of
      series R‖L sections with log-spaced corners (the R-L ladder of Kim and Neikirk,
      1996, cited from memory): ``Z = 2A·√(jω)·[atan(√(ωb/jω)) − atan(√(ωa/jω))]``
      with ``A = S·√2/(π·√ω_ref)``, so that Re Z ≈ ``S·√(f/1 MHz)`` inside the band
      and Im Z ≈ Re Z, as for a conductor well above its skin corner [derived].
    - ``Q`` (value in F, with a second fitted value, its loss tangent ``tan<name>``): a
      capacitance whose loss tangent is the same at every frequency, the constant-phase
      element ``Y = jω·C·(jω/ωc)^(−n)/cos(nπ/2)``, ``tan δ = tan(nπ/2)`` (Jonscher's
      "universal" dielectric response, from memory; docs/references.md §16), with C the
      real part of its capacitance at the band's geometric centre ``ωc``. Its
      capacitance falls as ``ω^(−n)``, its loss with it, so the loss tangent stays put,
      where a plain wideband Debye ladder across C would keep the loss (not the
      tangent) constant. The ladder
      (:func:`constant_phase_ladder`) is a Debye ladder whose weights follow the power
      law ``u^(−n)`` (:func:`constant_phase_continuum` its limit, within 0.3 % in ESR
      inside the band).
    - ``K`` (value in Ω, with a second fitted value, its skin corner ``fc<name>`` in Hz):
      a conductor whose resistance is ``R`` at DC and rises as √f above the corner,
      ``Z = R·√(1 + jω/ωc)`` (docs/references.md §9, §17), realised exactly as a series
      resistor ``R`` and R‖L sections whose corners are spaced in fixed ratios from ωc
      upwards (:func:`conductor_ladder`): the section weights do not depend on the
      corner, so the model moves smoothly with it; within 0.4 % of the continuous form
      (:func:`conductor_continuum`) up to the band's top.
    """

    kind: str
    name: str
    band: tuple[float, float] | None = None


@dataclass(frozen=True)
class Series:
    parts: tuple[Node, ...]


@dataclass(frozen=True)
class Parallel:
    parts: tuple[Node, ...]


Node = Union[Element, Series, Parallel]  # noqa: UP007 - a runtime alias used in dataclasses


def series(*parts: Node) -> Series:
    return Series(tuple(parts))


def parallel(*parts: Node) -> Parallel:
    return Parallel(tuple(parts))


def R(name: str) -> Element:
    return Element("R", name)


def L(name: str) -> Element:
    return Element("L", name)


def C(name: str) -> Element:
    return Element("C", name)


def Q(name: str, band: tuple[float, float]) -> Element:
    """Capacitance with a constant loss tangent over ``band`` (Hz); values in F and, as
    ``tan<name>``, the loss tangent."""
    return Element("Q", name, (float(band[0]), float(band[1])))


def loss_tangent_name(name: str) -> str:
    """The name of the loss-tangent value of the ``Q`` element ``name``."""
    return f"tan{name}"


def S(name: str, band: tuple[float, float]) -> Element:
    """Conductor loss (√f resistance) over ``band`` (Hz); value in Ω at 1 MHz."""
    return Element("S", name, (float(band[0]), float(band[1])))


def K(name: str, band: tuple[float, float]) -> Element:
    """Conductor with a skin corner: ``R·√(1 + jω/ωc)``, values ``name`` (Ω, DC) and
    ``fc<name>`` (Hz, the corner, inside ``band``); its ladder reaches ``band``'s top
    whatever the corner."""
    return Element("K", name, (float(band[0]), float(band[1])))


def corner_name(name: str) -> str:
    """The name of the skin-corner value (Hz) of the ``K`` element ``name``."""
    return f"fc{name}"


# Reference frequency of the skin element's value: Re Z = S at 1 MHz.
SKIN_REFERENCE_HZ = 1e6


def skin_continuum(jw: ComplexArray, band: tuple[float, float]) -> ComplexArray:
    """Impedance per ohm of the continuous √f form (see :class:`Element`)."""
    wa, wb = 2 * np.pi * band[0], 2 * np.pi * band[1]
    a = np.sqrt(2.0) / (np.pi * np.sqrt(2 * np.pi * SKIN_REFERENCE_HZ))
    root = np.sqrt(jw)
    return 2 * a * root * (np.arctan(np.sqrt(wb) / root) - np.arctan(np.sqrt(wa) / root))


def constant_phase_continuum(
    jw: ComplexArray, tan_delta: float, band: tuple[float, float]
) -> ComplexArray:
    """``jω·(jω/ωc)^(−n)/cos(nπ/2)`` with ``n = (2/π)·atan(tan δ)``, ``ωc`` the geometric
    centre of ``band``: admittance per farad of the ideal constant-phase capacitance
    (docs/references.md §16, from memory)."""
    n = (2 / np.pi) * np.arctan(tan_delta)
    wc = 2 * np.pi * np.sqrt(band[0] * band[1])
    return jw * (jw / wc) ** (-n) / np.cos(n * np.pi / 2)


def _constant_phase_parts(tan_delta: float, band: tuple[float, float]):
    """The branches of the constant-phase ladder per farad and the derivative of each
    capacitance's logarithm with respect to ``n``: ``(u, dc, dlog_dn, c_par, dlog_c_par)``
    with ``u`` the branch corners (rad/s, the last two the band's ends), ``dc`` their
    capacitances and ``c_par`` the plain capacitor across them.

    ``s^(1−n) = s·(sin nπ/π)·∫ u^(−n)/(u + s) du`` (the Stieltjes form of a power, for
    0 < n < 1) is a continuum of series R-C branches ``s·dC/(1 + s/u)`` with
    ``dC = A·u^(−n)·d ln u``, ``A = (2/π)·ωc^n·sin(nπ/2)`` per farad [derived]. Inside
    ``band`` the midpoint rule on the cells of :func:`_log_cells`; above it (u > ω2) the
    tail is a capacitor ``A·ω2^(−n)/(n(n+1))`` and a branch at ω2 of ``A·ω2^(−n)/(n+1)``
    (matching the tail's capacitance and its ω² conductance); below it (u < ω1) a branch
    at ω1 of ``A·ω1^(−n)/(1 − n)`` (the tail's conductance) [derived]. As n → 0 every
    branch vanishes and the capacitor tends to 1 F: a lossless capacitance.
    """
    n = (2 / math.pi) * math.atan(tan_delta)
    u, log_u, weight, log_wc = _constant_phase_band(band)
    a = (2 / math.pi) * math.exp(n * log_wc) * math.sin(n * math.pi / 2)
    da = log_wc + (math.pi / 2) / math.tan(n * math.pi / 2)  # d ln A / dn
    # a·u^(−n) times the cell width, and for the two tails (u = ω2, ω1) 1/(n + 1), 1/(1 − n).
    dc = (a * np.exp(-n * log_u)) * weight
    dc[-2] /= n + 1
    dc[-1] /= 1 - n
    dlog = da - log_u
    dlog[-2] -= 1 / (n + 1)
    dlog[-1] += 1 / (1 - n)
    c_par = a * math.exp(-n * log_u[-2]) / (n * (n + 1))
    dlog_c_par = da - log_u[-2] - 1 / n - 1 / (n + 1)
    return u, dc, dlog, c_par, dlog_c_par


@functools.lru_cache(maxsize=64)
def _constant_phase_band(band: tuple[float, float]):
    """What :func:`_constant_phase_parts` takes from the band alone, kept per band (a fit
    asks at every step): the branch corners ``u`` (the cells' centres, then ω2 and ω1),
    their logarithms, the cells' width (1 for the two tails) and ``ln ωc``."""
    w1, w2 = 2 * math.pi * band[0], 2 * math.pi * band[1]
    centres, width = _log_cells(band)
    u = np.concatenate([centres, [w2, w1]])
    weight = np.concatenate([np.full(centres.size, width), [1.0, 1.0]])
    out = (u, np.log(u), weight)
    for x in out:
        x.flags.writeable = False
    return (*out, 0.5 * (math.log(w1) + math.log(w2)))


def constant_phase_branches(jw: ComplexArray, u: NDArray[np.float64]) -> ComplexArray:
    """``jω/(1 + jω/u)`` per branch corner ``u`` (rows) and frequency: with ``jw``
    imaginary and ``x = ω/u``, ``ω·x/(1 + x²) + jω/(1 + x²)`` in real arithmetic
    [derived], several times faster than a complex division per branch."""
    w = jw.imag[None, :]
    x = w / u[:, None]
    wa = w / (1.0 + x * x)
    return (x * wa) + 1j * wa


def _constant_phase_shape(
    jw: ComplexArray, tan_delta: float, band: tuple[float, float]
) -> tuple[ComplexArray, ComplexArray]:
    """Admittance per farad of a ``Q`` element (its ladder itself) and its derivative with
    respect to ``ln tan δ``."""
    u, dc, dlog, c_par, dlog_c_par = _constant_phase_parts(tan_delta, band)
    branch = constant_phase_branches(jw, u)
    y = c_par * jw + dc @ branch
    dy_dn = c_par * dlog_c_par * jw + (dc * dlog) @ branch
    # n = (2/π)·atan(t): dn/d ln t = (2/π)·t/(1 + t²).
    dn = (2 / np.pi) * tan_delta / (1 + tan_delta**2)
    return y, dy_dn * dn


def constant_phase_ladder(
    value: float, tan_delta: float, band: tuple[float, float]
) -> tuple[float, list[tuple[float, float]]]:
    """``(C, [(R, C), ...])``: the plain capacitor and the series R-C branches that stand
    for a ``Q`` element of ``value`` F and loss tangent ``tan_delta`` (see
    :func:`_constant_phase_parts`); each branch ``R = 1/(u·C)``."""
    u, dc, _, c_par, _ = _constant_phase_parts(tan_delta, band)
    return float(value * c_par), [
        (float(1.0 / (ui * value * ci)), float(value * ci)) for ui, ci in zip(u, dc, strict=True)
    ]


def _skin_shape(jw: ComplexArray, band: tuple[float, float]) -> ComplexArray:
    """Impedance per ohm of an ``S`` element: the ladder of :func:`skin_ladder` itself."""
    centres, width = _log_cells(band)
    a = np.sqrt(2.0) / (np.pi * np.sqrt(2 * np.pi * SKIN_REFERENCE_HZ))
    r = a * np.sqrt(centres) * width
    return np.sum(r[:, None] * jw[None, :] / (centres[:, None] + jw[None, :]), axis=0)


_SHAPES: dict[tuple[str, tuple[float, float] | None, int, int], ComplexArray] = {}


def _shape(node: Element, jw: ComplexArray) -> ComplexArray:
    """The frequency shape of an ``S`` element, kept for the grids in use (a fit
    evaluates one grid hundreds of times and the shape does not depend on the value)."""
    key = (node.kind, node.band, jw.size, hash(jw.tobytes()))
    out = _SHAPES.get(key)
    if out is None:
        if len(_SHAPES) > 64:
            _SHAPES.clear()
        out = _skin_shape(jw, node.band)
        out.flags.writeable = False
        _SHAPES[key] = out
    return out


def _element_impedance(node: Element, jw: ComplexArray, value: float) -> ComplexArray:
    if node.kind == "R":
        return np.full(jw.shape, value, dtype=complex)
    if node.kind == "L":
        return jw * value
    if node.kind == "C":
        return 1.0 / (jw * value)
    if node.kind == "S":
        return value * _shape(node, jw)
    raise ValueError(f"unknown element kind {node.kind!r}")


# Sections per decade of the SPICE ladders of the loss elements (S, and Q's cells): two keep the
# ladder within about 1 % of its continuous limit [derived numerically, see the tests].
LADDER_PER_DECADE = 2.0


def _log_cells(band: tuple[float, float]) -> tuple[NDArray[np.float64], float]:
    """Centres (rad/s) and width (nepers) of equal cells in ln ω over ``band`` (Hz)."""
    lo, hi = np.log(2 * np.pi * band[0]), np.log(2 * np.pi * band[1])
    n = max(2, int(np.ceil(LADDER_PER_DECADE * (hi - lo) / np.log(10))))
    width = (hi - lo) / n
    return np.exp(lo + width * (np.arange(n) + 0.5)), float(width)


def skin_ladder(value: float, band: tuple[float, float]) -> list[tuple[float, float]]:
    """``(R, L)`` of the series R‖L sections that stand for an ``S`` element of ``value`` Ω.

    The continuous form integrates ``A·√u·jω/(u + jω)`` over ``d ln u``; each cell of the
    midpoint rule is one section ``R = A·√u·Δ``, ``L = R/u`` (corner u), whose impedance
    is ``R·jω/(u + jω)`` [derived].
    """
    centres, width = _log_cells(band)
    a = value * np.sqrt(2.0) / (np.pi * np.sqrt(2 * np.pi * SKIN_REFERENCE_HZ))
    return [(float(a * np.sqrt(u) * width), float(a * np.sqrt(u) * width / u)) for u in centres]


def element_names(node: Node) -> tuple[str, ...]:
    """Element names in the order they appear in the tree."""
    if isinstance(node, Element):
        if node.kind == "Q":
            return (node.name, loss_tangent_name(node.name))
        if node.kind == "K":
            return (node.name, corner_name(node.name))
        return (node.name,)
    out: tuple[str, ...] = ()
    for part in node.parts:
        out += element_names(part)
    return out


def _evaluate(
    node: Node, jw: ComplexArray, values: Mapping[str, float]
) -> tuple[ComplexArray, dict[str, ComplexArray]]:
    """Impedance of ``node`` and ``p·dZ/dp`` of each element below it (by name)."""
    if isinstance(node, Element) and node.kind == "Q":
        tan = loss_tangent_name(node.name)
        y, dy = _constant_phase_shape(jw, values[tan], node.band)
        z = 1.0 / (values[node.name] * y)
        return z, {node.name: -z, tan: -z * dy / y}
    if isinstance(node, Element) and node.kind == "K":
        fc = corner_name(node.name)
        shape, dshape = _conductor_shape(jw, values[fc], node.band)
        value = values[node.name]
        return value * shape, {node.name: value * shape, fc: value * dshape}
    if isinstance(node, Element):
        z = _element_impedance(node, jw, values[node.name])
        return z, {node.name: -z if node.kind in "CD" else z}
    results = [_evaluate(part, jw, values) for part in node.parts]
    if isinstance(node, Series):
        z = results[0][0].copy()
        for zi, _ in results[1:]:
            z += zi
        jac: dict[str, ComplexArray] = {}
        for _, ji in results:
            jac.update(ji)
        return z, jac
    y = 1.0 / results[0][0]
    for zi, _ in results[1:]:
        y += 1.0 / zi
    z = 1.0 / y
    jac = {}
    for zi, ji in results:
        ratio = z / zi
        factor = ratio * ratio  # not ratio**2: numpy's complex power is far slower
        for name, d in ji.items():
            jac[name] = factor * d
    return z, jac


def impedance_and_jacobian(
    node: Node, f: NDArray[np.float64], values: Mapping[str, float]
) -> tuple[ComplexArray, ComplexArray]:
    """Impedance (Ω) of ``node`` at ``f`` (Hz) and ``p·dZ/dp`` for each element.

    Returns ``(z, jac)`` with ``z`` of shape ``(nf,)`` and ``jac`` of shape
    ``(n_elements, nf)`` in the order of :func:`element_names`.
    """
    names = element_names(node)
    jw = 2j * np.pi * np.asarray(f, dtype=float)
    z, parts = _evaluate(node, jw, values)
    return z, np.array([parts[name] for name in names])


def network_impedance(node: Node, f: Any, values: Mapping[str, float]) -> ComplexArray:
    """Impedance (Ω) of ``node`` at ``f`` (Hz) for element ``values`` (SI units); a long
    grid in pieces of :data:`CHUNK_POINTS` (a loss element's ladder holds a few dozen
    arrays of the grid's length)."""
    jw = 2j * np.pi * np.asarray(f, dtype=float)
    if jw.ndim == 1 and jw.size > CHUNK_POINTS:
        return np.concatenate(
            [
                _impedance(node, jw[i : i + CHUNK_POINTS], values)
                for i in range(0, jw.size, CHUNK_POINTS)
            ]
        )
    return _impedance(node, jw, values)


CHUNK_POINTS = 65536


def _impedance(node: Node, jw: ComplexArray, values: Mapping[str, float]) -> ComplexArray:
    if isinstance(node, Element) and node.kind == "Q":
        u, dc, _, c_par, _ = _constant_phase_parts(values[loss_tangent_name(node.name)], node.band)
        y = c_par * jw + dc @ constant_phase_branches(jw, u)
        return 1.0 / (values[node.name] * y)
    if isinstance(node, Element) and node.kind == "K":
        shape, _ = conductor_terms(jw, values[corner_name(node.name)], node.band)
        return values[node.name] * shape
    if isinstance(node, Element):
        return _element_impedance(node, jw, values[node.name])
    zs = [_impedance(part, jw, values) for part in node.parts]
    if isinstance(node, Series):
        return sum(zs)
    return 1.0 / sum(1.0 / z for z in zs)


_SHORT = {"R": "low", "L": "low", "C": "high", "S": "low", "Q": "high", "K": "low"}
_OPEN = {"R": "high", "L": "high", "C": "low", "S": "high", "Q": "low", "K": "high"}


def vanishing_sides(node: Node, context: tuple[str, ...] = ("pins",)) -> dict[str, set[str]]:
    """For each element, the bounds (``"low"``, ``"high"``) at which it harmlessly drops out.

    In series an element drops out as a short (R, L low; C high), and also as an open
    when that series branch sits in a parallel group (the branch then just vanishes); in
    a parallel group as an open (R, L high; C low), and also as a short when that group
    itself sits in series (the group then just vanishes). An element ending at such a
    bound was not needed by the data; any other bound means the model is strained.
    """
    if isinstance(node, Element):
        sides = set()
        if context[-1] in ("series", "pins"):
            sides.add(_SHORT[node.kind])
            if len(context) >= 2 and context[-2] == "parallel":
                sides.add(_OPEN[node.kind])  # the whole branch opens and vanishes
        else:
            sides.add(_OPEN[node.kind])
            if len(context) >= 2 and context[-2] == "series":
                sides.add(_SHORT[node.kind])
        if node.kind == "Q":
            # A vanishing loss tangent leaves a lossless capacitance: the loss drops out.
            return {node.name: sides, loss_tangent_name(node.name): {"low"}}
        if node.kind == "K":
            # A corner above the band leaves a plain resistor: the skin loss drops out.
            return {node.name: sides, corner_name(node.name): {"high"}}
        return {node.name: sides}
    where = "series" if isinstance(node, Series) else "parallel"
    out: dict[str, set[str]] = {}
    for part in node.parts:
        out.update(vanishing_sides(part, (*context, where)))
    return out


def has_dc_path(node: Node) -> bool:
    """True when the network conducts at DC (some path holds no capacitor)."""
    if isinstance(node, Element):
        return node.kind not in "CDQ"
    if isinstance(node, Series):
        return all(has_dc_path(p) for p in node.parts)
    return any(has_dc_path(p) for p in node.parts)


def spice_lines(node: Node, values: Mapping[str, float], a: str = "1", b: str = "2") -> list[str]:
    """SPICE element lines of ``node`` between nodes ``a`` and ``b``.

    Internal nodes are named ``n1``, ``n2``, … (local to the subcircuit). A bleed
    resistor ``Rbleed`` is added across the whole network when it has no DC path.
    """
    counter = [0]
    lines: list[str] = []

    def new_node() -> str:
        counter[0] += 1
        return f"n{counter[0]}"

    def emit(n: Node, x: str, y: str) -> None:
        if isinstance(n, Element) and n.kind == "Q":
            # A plain capacitor and one series R-C branch per cell, all between x and y.
            c_par, branches = constant_phase_ladder(
                values[n.name], values[loss_tangent_name(n.name)], n.band
            )
            lines.append(f"C{n.name}0 {x} {y} {c_par:.9g}")
            for k, (r, c) in enumerate(branches, start=1):
                mid = new_node()
                lines.append(f"R{n.name}{k} {x} {mid} {r:.9g}")
                lines.append(f"C{n.name}{k} {mid} {y} {c:.9g}")
        elif isinstance(n, Element) and n.kind == "K":
            # The resistor, the R‖L sections and the tail inductor in series from x to y.
            r0, sections, l_tail = conductor_ladder(
                values[n.name], values[corner_name(n.name)], n.band
            )
            nodes = [x] + [new_node() for _ in range(len(sections) + 1)] + [y]
            lines.append(f"R{n.name}0 {nodes[0]} {nodes[1]} {r0:.9g}")
            for k, (r, ind) in enumerate(sections, start=1):
                lines.append(f"R{n.name}{k} {nodes[k]} {nodes[k + 1]} {r:.9g}")
                lines.append(f"L{n.name}{k} {nodes[k]} {nodes[k + 1]} {ind:.9g}")
            lines.append(f"L{n.name}T {nodes[-2]} {nodes[-1]} {l_tail:.9g}")
        elif isinstance(n, Element) and n.kind == "S":
            # R‖L sections in series from x to y.
            sections = skin_ladder(values[n.name], n.band)
            nodes = [x] + [new_node() for _ in sections[:-1]] + [y]
            for k, (r, ind) in enumerate(sections, start=1):
                lines.append(f"R{n.name}{k} {nodes[k - 1]} {nodes[k]} {r:.9g}")
                lines.append(f"L{n.name}{k} {nodes[k - 1]} {nodes[k]} {ind:.9g}")
        elif isinstance(n, Element):
            lines.append(f"{n.name} {x} {y} {values[n.name]:.9g}")
        elif isinstance(n, Series):
            nodes = [x] + [new_node() for _ in n.parts[:-1]] + [y]
            for part, u, v in zip(n.parts, nodes[:-1], nodes[1:], strict=True):
                emit(part, u, v)
        else:
            for part in n.parts:
                emit(part, x, y)

    emit(node, a, b)
    if not has_dc_path(node):
        lines.append(f"Rbleed {a} {b} {BLEED_RESISTANCE:.6g}")
    return lines


# starts(order, f, z, landmarks, previous) -> start values; ``previous`` is the fitted
# values of the next lower order of the same family, or None.
Starts = Callable[
    [int, NDArray[np.float64], ComplexArray, Mapping[str, Any], "Mapping[str, float] | None"],
    list[dict[str, float]],
]
# reduce(order, values, weakness) -> start values of the next lower order.
Reduce = Callable[[int, Mapping[str, float], Mapping[str, float]], dict[str, float]]
Bounds = Callable[[int, NDArray[np.float64], Mapping[str, Any]], dict[str, tuple[float, float]]]


@dataclass(frozen=True)
class ModelFamily:
    """A family of equivalent circuits, possibly in several orders.

    ``circuit(order)`` gives the network; ``starts(order, f, z, landmarks, previous)`` a
    short list of deterministic start values (dicts of element values, SI) from the
    landmarks and, when given, the fit of the next lower order;
    ``bounds(order, f, landmarks)``, when given, the (low, high) value of each element;
    without it every element gets the :data:`WIDE_BOUNDS` of its kind.
    ``order_of(names)`` recovers the order from a set of element names.
    ``network(order, band)``, when given, builds the circuit for a measured band (Hz)
    (families with ``Q``, ``S`` or ``K`` elements); ``circuit(order)`` is then the circuit of a
    default band, good for names and orders only.
    ``optional`` names elements that may drop out without the order losing the data's
    support (a part of the circuit the measured band may not show, such as a bead's
    winding capacitance above the sweep); an element of a section that drops out means
    the order has one section too many.
    ``reduce(order, values, weakness)``, when given, turns a fit of ``order`` into start
    values of the next lower order by dropping the part of the circuit the data did not
    support (``weakness``: each element's relative one-sigma uncertainty, ``inf`` for an
    element pinned at a bound); without it the lower order's elements are kept by name.
    """

    name: str
    kind: str
    orders: tuple[int, ...]
    description: str
    circuit: Callable[[int], Node]
    starts: Starts
    bounds: Bounds | None = None
    reduce: Reduce | None = None
    network: Callable[[int, tuple[float, float]], Node] | None = None
    optional: tuple[str, ...] = ()

    def circuit_for(self, order: int, f: NDArray[np.float64]) -> Node:
        """The circuit of ``order`` fitted on the frequencies ``f`` (Hz): families with
        loss spread over a band (``Q``, ``S``, ``K`` elements) place it over ``f``'s span."""
        if self.network is None:
            return self.circuit(order)
        return self.network(order, (float(np.min(f)), float(np.max(f))))

    def element_bounds(
        self, order: int, f: NDArray[np.float64], landmarks: Mapping[str, Any]
    ) -> dict[str, tuple[float, float]]:
        """The (low, high) value of each element of ``order`` (SI units)."""
        if self.bounds is not None:
            return self.bounds(order, f, landmarks)
        return wide_bounds(self.element_names(order))

    def lower_order(self, order: int) -> int | None:
        """The next lower order of the family, or None for its lowest."""
        below = [o for o in self.orders if o < order]
        return max(below) if below else None

    def reduced_start(
        self, order: int, values: Mapping[str, float], weakness: Mapping[str, float]
    ) -> dict[str, float] | None:
        """Start values of the next lower order from a fit of ``order`` (None at the lowest)."""
        lower = self.lower_order(order)
        if lower is None:
            return None
        if self.reduce is not None:
            return self.reduce(order, values, weakness)
        return {name: float(values[name]) for name in self.element_names(lower)}

    def element_names(self, order: int | None = None) -> tuple[str, ...]:
        return _circuit_names(self.circuit, self.orders[0] if order is None else order)

    def order_of(self, values: Mapping[str, float]) -> int:
        """The order whose element names are exactly the keys of ``values``."""
        keys = set(values)
        for order in self.orders:
            if set(self.element_names(order)) == keys:
                return order
        raise ValueError(
            f"model {self.name}: elements {sorted(keys)} match no order; "
            f"expected e.g. {list(self.element_names(self.orders[0]))}"
        )

    def impedance(self, f: Any, values: Mapping[str, float]) -> ComplexArray:
        """Impedance (Ω) at ``f`` (Hz, finite and > 0) of the circuit with element ``values``
        (SI)."""
        f = np.asarray(f, dtype=float)
        if np.any(~np.isfinite(f)) or np.any(f <= 0):
            raise ValueError(
                f"model {self.name}: frequencies must be finite and above 0 Hz "
                "(a capacitor's impedance is infinite at DC)"
            )
        return network_impedance(self.circuit(self.order_of(values)), f, values)

    def spice_lines(self, values: Mapping[str, float]) -> list[str]:
        """SPICE element lines between pins 1 and 2 for element ``values`` (SI)."""
        return spice_lines(self.circuit(self.order_of(values)), values)


def drop_section(
    order: int,
    values: Mapping[str, float],
    weakness: Mapping[str, float],
    prefixes: Sequence[str],
) -> dict[str, float]:
    """``values`` of a circuit of ``order`` numbered sections (elements ``<prefix><k>``,
    k = 1..order) without its weakest section, the rest renumbered 1..order-1.

    The weakest section is the one holding the least determined element (the largest
    ``weakness``); the sections are interchangeable in the circuit, so renumbering them
    changes nothing.
    """

    def score(k: int) -> float:
        return max(float(weakness.get(f"{p}{k}", 0.0)) for p in prefixes)

    weakest = max(range(1, order + 1), key=score)
    section_names = {f"{p}{k}" for p in prefixes for k in range(1, order + 1)}
    out = {name: float(v) for name, v in values.items() if name not in section_names}
    kept = [k for k in range(1, order + 1) if k != weakest]
    for new, old in enumerate(kept, start=1):
        for p in prefixes:
            out[f"{p}{new}"] = float(values[f"{p}{old}"])
    return out


@functools.lru_cache(maxsize=256)
def _circuit_names(circuit: Callable[[int], Node], order: int) -> tuple[str, ...]:
    """The element names of ``circuit(order)``, built once per circuit and order (a fit
    asks for them many times)."""
    return element_names(circuit(order))


def clip_to_bounds(
    values: Mapping[str, float], bounds: Mapping[str, tuple[float, float]]
) -> dict[str, float]:
    """Move start values strictly inside their bounds (a factor 1e-6 in log space)."""
    out = {}
    for name, value in values.items():
        lo, hi = bounds[name]
        v = float(value)
        if not (math.isfinite(v) and v > 0):
            v = math.sqrt(lo * hi)
        out[name] = min(max(v, lo * (1 + 1e-6)), hi * (1 - 1e-6))
    return out


def landmark(landmarks: Mapping[str, Any], key: str, default: float) -> float:
    """A landmark value, or ``default`` when it is missing or not a positive number."""
    value = landmarks.get(key)
    if value is None or not np.isfinite(value) or value <= 0:
        return float(default)
    return float(value)


def span(f: Sequence[float]) -> tuple[float, float]:
    f = np.asarray(f, dtype=float)
    return float(f.min()), float(f.max())


# Wide limits by element kind (SI): far outside any passive on a power-delivery network,
# they only keep the optimiser in a range where the arithmetic stays finite.
WIDE_BOUNDS = {
    "R": (1e-7, 1e7),
    "L": (1e-15, 1.0),
    "C": (1e-16, 10.0),
    "S": (1e-9, 1e4),
    "Q": (1e-16, 10.0),
    # A loss tangent (the second value of a Q element, named ``tan<name>``).
    "t": (1e-5, 1.0),
    "K": (1e-7, 1e7),
    # A skin corner in Hz (the second value of a K element, named ``fc<name>``).
    "f": (1e-3, 1e12),
}


def wide_bounds(names: Sequence[str]) -> dict[str, tuple[float, float]]:
    """The :data:`WIDE_BOUNDS` of each element by its kind letter."""
    return {name: WIDE_BOUNDS[name[0]] for name in names}
