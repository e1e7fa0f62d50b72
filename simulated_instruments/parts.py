"""True circuits of invented parts, richer than any of zbench's fit models.

Each part is a frozen dataclass with ``impedance(f, bias_v=0.0)`` returning the complex
impedance (Ω) between its two terminals at the frequencies ``f`` (Hz, all > 0). These are
pure functions on numpy arrays; the simulated analyser calls them to compute what a part
in the fixture does to the measured S-parameters.

The circuits hold effects that the fit models only approximate, so a fit to them is a
real test of the fitter:

- :class:`Mlcc`: series R-L-C with a skin-effect conductor impedance above a corner, a
  causal constant dielectric loss tangent (the capacitance falls slowly with frequency,
  as it must with a constant loss), a weak second branch (a higher mode of the stack) and,
  for class II dielectrics, loss of capacitance under DC bias,
  ``C(V) = C0 / (1 + (V/V50)^2)`` (heuristic of docs/references.md §5).
- :class:`BulkCapacitor`: series ESR and ESL with a porous-electrode (de Levie) line
  ``Z = sqrt(R/(jωC))·coth(sqrt(jωRC))`` shunted by a leakage resistance.
- :class:`PowerInductor`: winding with skin-effect resistance, inductance, a core-loss
  resistance that rises slowly with frequency and the winding capacitance (parallel SRF).
- :class:`FerriteBead`: Rdc in series with L‖R‖C whose loss resistance falls with
  frequency, optionally a second L‖R relaxation in series.

All element values are invented; none is a maker's data. Scenario YAML builds parts with
:func:`part_from_dict`, and :func:`with_spread` draws seeded samples of a lot.
"""

from __future__ import annotations

import dataclasses
import math
from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

import numpy as np

from bench.errors import InputError
from bench.units import QuantityError, parse_quantity


class PartError(InputError, ValueError):
    """A part description (scenario YAML or code) that cannot describe a real part."""


def _frequencies(f: Any) -> np.ndarray:
    f = np.asarray(f, dtype=float)
    if np.any(~np.isfinite(f)) or np.any(f <= 0.0):
        raise PartError(
            "part impedance needs finite frequencies above 0 Hz; "
            f"got values from {np.min(f):g} to {np.max(f):g} Hz",
            hint="evaluate the part on a positive frequency grid",
        )
    return f


def _skin(f: np.ndarray, corner_hz: float) -> np.ndarray:
    """Relative conductor impedance ``sqrt(1 + j f/fc)``.

    Equal to 1 well below ``fc`` and to ``(1 + j)·sqrt(f/(2 fc))`` well above it: the
    resistance grows as sqrt(f) and an equal internal reactance appears, as for a
    conductor thicker than the skin depth. Its real part stays positive (passive), and it
    is causal, unlike a real sqrt(f) resistance alone.
    """
    return np.sqrt(1.0 + 1j * f / corner_hz)


def _coth(x: np.ndarray) -> np.ndarray:
    """coth of complex ``x`` with Re x > 0, stable for small and large |x|."""
    x = np.asarray(x, dtype=complex)
    out = np.empty_like(x)
    small = np.abs(x) < 1e-3
    xs = x[small]
    # Series of coth near 0; the next term (2x^5/945) is below 1e-17 relative here.
    out[small] = 1.0 / xs + xs / 3.0 - xs**3 / 45.0
    xl = x[~small]
    e = np.exp(-2.0 * xl)
    out[~small] = (1.0 + e) / (-np.expm1(-2.0 * xl))
    return out


def de_levie_line(f: Any, r_line: float, c_line: float) -> np.ndarray:
    """Impedance (Ω) of a uniform porous-electrode RC line, open at its far end.

    ``Z = sqrt(R/(jωC))·coth(sqrt(jωRC))`` with total line resistance ``r_line`` (Ω) and
    capacitance ``c_line`` (F). Low-frequency limit ``R/3 + 1/(jωC)``; at high frequency
    the phase tends to −45°. ``f`` in Hz, > 0.
    """
    f = _frequencies(f)
    jw = 2j * np.pi * f
    return np.sqrt(r_line / (jw * c_line)) * _coth(np.sqrt(jw * r_line * c_line))


def constant_loss_capacitance(f: Any, c: float, tan_d: float, f_ref: float) -> np.ndarray:
    """Complex capacitance (F) of a dielectric with the same loss tangent at every frequency.

    ``Ĉ(f) = c·(1 − j·tan_d)·(f/f_ref)^(−n)`` with ``n = (2/π)·atan(tan_d)``. Derivation
    (docs/references.md §9, derived): a causal, passive dielectric whose loss tangent is
    constant is the constant-phase element ``Y = K·(jω)^(1−n)``; its phase
    ``(1 − n)·π/2`` gives ``tan δ = Re Y/Im Y = tan(nπ/2)``, so ``n = 2δ/π``. Writing
    ``Y = jω·Ĉ`` gives ``Ĉ ∝ (jω)^(−n) = ω^(−n)·e^(−jδ) ∝ ω^(−n)·(1 − j·tanδ)``, and the
    real factor is fixed by ``Re Ĉ(f_ref) = c``. ``Ĉ`` is analytic in the right half of
    the s-plane (``s^(−n)``), so it is causal, unlike a constant ``c·(1 − j·tanδ)``, which
    breaks Kramers-Kronig; its real part falls by ``(2/π)·tanδ·ln 10`` ≈ 4.4 % per decade
    at tanδ = 0.03. The fitter's element ``D`` is the band-limited ladder of the same
    response (the wideband Debye idea of Djordjevic et al., IEEE Trans. EMC 43(4), 2001,
    from memory).
    """
    f = np.asarray(f, dtype=float)
    n = (2.0 / np.pi) * math.atan(tan_d)
    return c * (1.0 - 1j * tan_d) * (f / f_ref) ** (-n)


def _positive(obj: Any, names: tuple[str, ...]) -> None:
    for name in names:
        value = getattr(obj, name)
        if value is None:
            continue
        if not (isinstance(value, (int, float)) and math.isfinite(value) and value > 0):
            raise PartError(
                f"{type(obj).__name__} {obj.name!r}: {name} must be a positive number, "
                f"got {value!r}",
                hint=f"give {name} a value above 0",
            )


def _non_negative(obj: Any, names: tuple[str, ...]) -> None:
    for name in names:
        value = getattr(obj, name)
        if not (isinstance(value, (int, float)) and math.isfinite(value) and value >= 0):
            raise PartError(
                f"{type(obj).__name__} {obj.name!r}: {name} must be 0 or more, got {value!r}",
                hint=f"give {name} a value of 0 or above",
            )


# Capacitance voltage at which class II dielectrics have lost half their capacitance, as
# a fraction of the rated voltage. X7R: 8.22 V / 16 V from docs/references.md §5 (derived from a
# published 0805 measurement); X5R a little worse (invented for the simulator).
_V50_FRACTION = {"X7R": 0.51, "X5R": 0.42}
_DEFAULT_TAN_DELTA = {"X7R": 0.025, "X5R": 0.03, "C0G": 0.0005}


@dataclass(frozen=True)
class Mlcc:
    """A multilayer ceramic capacitor.

    Main branch: ``esr·sqrt(1 + j f/skin_corner) + jω·esl + 1/(jω·Ĉ(ω))`` with the
    dielectric's complex capacitance (see :func:`constant_loss_capacitance`)
    ``Ĉ(ω) = C(V)·(1 − j·tanδ)·(f/c_reference_frequency)^(−n)``, ``n = (2/π)·atan(tanδ)``:
    the loss tangent is the same at every frequency, the capacitance falls by a factor
    ``10^(−n)`` per decade, and at ``c_reference_frequency`` (1 kHz, where capacitance is
    usually read) the capacitance is the nominal one; in parallel a weak second branch
    with capacitance ``mode_c_ratio·C``, inductance
    ``mode_l_ratio·esl`` and resistance ``mode_r_ratio·esr`` (``mode_c_ratio`` is 0 by
    default: a single mounted part shows no second mode unless it is invented with one);
    across the dielectric an insulation resistance.

    Units: F, H, Ω, Hz, V. ``dielectric`` is ``"X5R"``, ``"X7R"`` (class II, DC-bias
    dependent) or ``"C0G"`` (class I, no bias dependence). ``v50`` (V) defaults to a
    fraction of ``rated_voltage``. ``loss_tangent`` defaults by dielectric.
    ``c_reference_frequency`` (Hz) is where ``capacitance`` holds.
    Note the skin term adds an internal inductance ``esr/(4π·skin_corner)`` at low
    frequency, so the apparent ESL is slightly above ``esl``.
    """

    name: str = "mlcc"
    capacitance: float = 10e-6
    esl: float = 0.5e-9
    esr: float = 3e-3
    rated_voltage: float = 6.3
    dielectric: str = "X5R"
    v50: float | None = None
    loss_tangent: float | None = None
    skin_corner: float = 20e6
    mode_c_ratio: float = 0.0
    mode_l_ratio: float = 5.0
    mode_r_ratio: float = 10.0
    insulation_resistance: float = 1e9
    c_reference_frequency: float = 1e3

    def __post_init__(self) -> None:
        if self.dielectric not in ("X5R", "X7R", "C0G"):
            raise PartError(
                f"Mlcc {self.name!r}: dielectric must be X5R, X7R or C0G, got {self.dielectric!r}",
                hint="choose one of X5R, X7R, C0G",
            )
        _positive(
            self,
            (
                "capacitance",
                "esl",
                "esr",
                "rated_voltage",
                "v50",
                "skin_corner",
                "mode_l_ratio",
                "mode_r_ratio",
                "insulation_resistance",
                "c_reference_frequency",
            ),
        )
        _non_negative(self, ("mode_c_ratio",))
        if self.loss_tangent is not None:
            _non_negative(self, ("loss_tangent",))

    @property
    def kind(self) -> str:
        return "capacitor"

    @property
    def tan_delta(self) -> float:
        """Dielectric loss tangent used (dimensionless)."""
        if self.loss_tangent is not None:
            return float(self.loss_tangent)
        return _DEFAULT_TAN_DELTA[self.dielectric]

    def capacitance_at(self, bias_v: float = 0.0) -> float:
        """Main-branch capacitance (F) under ``bias_v`` volts of DC bias."""
        if self.dielectric == "C0G":
            return self.capacitance
        return self.capacitance / (1.0 + (bias_v / self.v50_volts) ** 2)

    @property
    def v50_volts(self) -> float:
        """The bias (V) at which a class II part has lost half its capacitance."""
        if self.v50 is not None:
            return self.v50
        return _V50_FRACTION.get(self.dielectric, 1e9) * self.rated_voltage

    def impedance(self, f: Any, bias_v: float = 0.0) -> np.ndarray:
        """Complex impedance (Ω) at ``f`` (Hz, > 0) under ``bias_v`` volts of DC bias."""
        f = _frequencies(f)
        w = 2 * np.pi * f
        c = self.capacitance_at(bias_v)
        tan_d = self.tan_delta
        f_ref = self.c_reference_frequency
        # Dielectric admittance with constant loss tangent and insulation leakage.
        y_diel = 1j * w * constant_loss_capacitance(f, c, tan_d, f_ref)
        y_diel = y_diel + 1.0 / self.insulation_resistance
        z_main = self.esr * _skin(f, self.skin_corner) + 1j * w * self.esl + 1.0 / y_diel
        if self.mode_c_ratio <= 0:
            return z_main
        c2 = self.mode_c_ratio * c
        y2 = 1j * w * constant_loss_capacitance(f, c2, tan_d, f_ref)
        z_mode = (
            self.mode_r_ratio * self.esr * _skin(f, self.skin_corner)
            + 1j * w * self.mode_l_ratio * self.esl
            + 1.0 / y2
        )
        return 1.0 / (1.0 / z_main + 1.0 / z_mode)


@dataclass(frozen=True)
class BulkCapacitor:
    """A polymer or electrolytic bulk capacitor.

    ``Z = esr + jω·esl + (line ‖ leakage)`` where the line is the de Levie porous
    electrode of total resistance ``line_resistance`` (Ω) and capacitance ``capacitance``
    (F); at low frequency it adds ``line_resistance/3`` to the ESR. ``leakage_resistance``
    (Ω) is the DC leakage path. ``technology`` is ``"polymer"`` or ``"electrolytic"``
    (a label; the values carry the difference). No DC-bias dependence is modelled.
    """

    name: str = "bulk"
    capacitance: float = 330e-6
    line_resistance: float = 30e-3
    esr: float = 8e-3
    esl: float = 2.5e-9
    leakage_resistance: float = 1e6
    rated_voltage: float = 16.0
    technology: str = "polymer"

    def __post_init__(self) -> None:
        if self.technology not in ("polymer", "electrolytic"):
            raise PartError(
                f"BulkCapacitor {self.name!r}: technology must be polymer or electrolytic, "
                f"got {self.technology!r}",
                hint="choose polymer or electrolytic",
            )
        _positive(
            self,
            (
                "capacitance",
                "line_resistance",
                "esr",
                "esl",
                "leakage_resistance",
                "rated_voltage",
            ),
        )

    @property
    def kind(self) -> str:
        return "capacitor"

    def capacitance_at(self, bias_v: float = 0.0) -> float:
        """Capacitance (F); bulk capacitors here do not depend on DC bias."""
        return self.capacitance

    def impedance(self, f: Any, bias_v: float = 0.0) -> np.ndarray:
        """Complex impedance (Ω) at ``f`` (Hz, > 0); ``bias_v`` has no effect."""
        f = _frequencies(f)
        w = 2 * np.pi * f
        z_line = de_levie_line(f, self.line_resistance, self.capacitance)
        z_shunt = 1.0 / (1.0 / z_line + 1.0 / self.leakage_resistance)
        return self.esr + 1j * w * self.esl + z_shunt


@dataclass(frozen=True)
class PowerInductor:
    """A wound power inductor.

    ``Z = 1 / (1/(r_dc·sqrt(1 + j f/skin_corner) + jωL) + 1/Zcore(f) + jω·winding_capacitance)``
    with ``Zcore(f) = core_loss_resistance·(j f/1 MHz)^a / cos(aπ/2)``, ``a`` the
    ``core_loss_exponent``: the core-loss resistance (Ω) seen in parallel rises as f^a, and
    as any causal impedance whose resistance changes with frequency it carries the
    reactance Kramers-Kronig asks for (a constant-phase form, phase a·90°; a purely real
    resistance that rose with f would be no physical part). Units: H, Ω, F, Hz.
    The parallel resonance (SRF) is near ``1/(2π·sqrt(L·Cw))``.
    """

    name: str = "inductor"
    inductance: float = 2.2e-6
    r_dc: float = 12e-3
    skin_corner: float = 200e3
    core_loss_resistance: float = 3e3
    core_loss_exponent: float = 0.15
    winding_capacitance: float = 6e-12
    rated_current: float = 5.0

    def __post_init__(self) -> None:
        _positive(
            self,
            (
                "inductance",
                "r_dc",
                "skin_corner",
                "core_loss_resistance",
                "winding_capacitance",
                "rated_current",
            ),
        )
        _non_negative(self, ("core_loss_exponent",))
        if self.core_loss_exponent >= 1:
            raise PartError(
                f"PowerInductor {self.name!r}: core_loss_exponent must be below 1, "
                f"got {self.core_loss_exponent!r}",
                hint="a core-loss resistance rising as f^a with a below 1 (0.1 to 0.5 is usual)",
            )

    @property
    def kind(self) -> str:
        return "inductor"

    def impedance(self, f: Any, bias_v: float = 0.0) -> np.ndarray:
        """Complex impedance (Ω) at ``f`` (Hz, > 0); ``bias_v`` has no effect."""
        f = _frequencies(f)
        w = 2 * np.pi * f
        z_wind = self.r_dc * _skin(f, self.skin_corner) + 1j * w * self.inductance
        a = self.core_loss_exponent
        z_core = self.core_loss_resistance * (1j * f / 1e6) ** a / np.cos(a * np.pi / 2)
        y = 1.0 / z_wind + 1.0 / z_core + 1j * w * self.winding_capacitance
        return 1.0 / y


@dataclass(frozen=True)
class FerriteBead:
    """A ferrite bead.

    ``Z = r_dc + (L ‖ R(f) ‖ C) [+ (L2 ‖ R2)]`` with ``R(f) = resistance /
    (1 + f/loss_corner)^loss_exponent``: the loss resistance (Ω) falls at high frequency
    as the ferrite's permeability relaxes. The optional second relaxation (``inductance2``
    H, ``resistance2`` Ω, both set or both None) adds a second hump. Units: H, Ω, F, Hz.

    A dispersive ferrite: with ``relaxation_frequency`` (Hz) set, the core's inductance
    follows a Cole-Cole permeability, ``L·μn(f)`` with ``μn = 1/(1 + (j f/fr)^(1 − α))``
    normalised to 1 at DC and ``α = cole_alpha`` (0 is a single Debye relaxation, larger
    spreads it over more decades): ``jωL·μn`` turns from inductive to resistive above
    ``fr`` as μ'' takes over, as ferrite permeability spectra do (Cole and Cole, J. Chem.
    Phys. 9, 341 (1941), the dispersion form, cited from memory; docs/references.md §9).
    """

    name: str = "bead"
    r_dc: float = 40e-3
    inductance: float = 1.2e-6
    resistance: float = 600.0
    capacitance: float = 1.0e-12
    loss_corner: float = 200e6
    loss_exponent: float = 0.3
    inductance2: float | None = None
    resistance2: float | None = None
    rated_current: float = 2.0
    relaxation_frequency: float | None = None
    cole_alpha: float = 0.0

    def __post_init__(self) -> None:
        _positive(
            self,
            (
                "r_dc",
                "inductance",
                "resistance",
                "capacitance",
                "loss_corner",
                "inductance2",
                "resistance2",
                "rated_current",
                "relaxation_frequency",
            ),
        )
        _non_negative(self, ("loss_exponent",))
        if not 0.0 <= self.cole_alpha < 1.0:
            raise PartError(
                f"FerriteBead {self.name!r}: cole_alpha must lie in [0, 1), got {self.cole_alpha}",
                hint="0 for a single relaxation, about 0.1 to 0.4 for a real ferrite",
            )
        if (self.inductance2 is None) != (self.resistance2 is None):
            raise PartError(
                f"FerriteBead {self.name!r}: inductance2 and resistance2 go together; "
                f"got inductance2={self.inductance2!r}, resistance2={self.resistance2!r}",
                hint="give both for a second relaxation, or neither",
            )

    @property
    def kind(self) -> str:
        return "inductor"

    def impedance(self, f: Any, bias_v: float = 0.0) -> np.ndarray:
        """Complex impedance (Ω) at ``f`` (Hz, > 0); ``bias_v`` has no effect."""
        f = _frequencies(f)
        w = 2 * np.pi * f
        r = self.resistance / (1.0 + f / self.loss_corner) ** self.loss_exponent
        z_core = 1j * w * self.inductance * self.permeability(f)
        y = 1.0 / z_core + 1.0 / r + 1j * w * self.capacitance
        z = self.r_dc + 1.0 / y
        if self.inductance2 is not None and self.resistance2 is not None:
            y2 = 1.0 / (1j * w * self.inductance2) + 1.0 / self.resistance2
            z = z + 1.0 / y2
        return z

    def permeability(self, f: Any) -> np.ndarray:
        """The core's relative permeability normalised to 1 at DC (1 without dispersion)."""
        f = _frequencies(f)
        if self.relaxation_frequency is None:
            return np.ones(f.shape, dtype=complex)
        return 1.0 / (1.0 + (1j * f / self.relaxation_frequency) ** (1.0 - self.cole_alpha))


Part = Mlcc | BulkCapacitor | PowerInductor | FerriteBead

PART_TYPES: dict[str, type] = {
    "mlcc": Mlcc,
    "bulk": BulkCapacitor,
    "inductor": PowerInductor,
    "bead": FerriteBead,
}

# Unit of each numeric field, for reading SI strings such as "4.7u" or "0.5 nH".
_FIELD_UNITS: dict[str, str | None] = {
    "capacitance": "F",
    "winding_capacitance": "F",
    "esl": "H",
    "inductance": "H",
    "inductance2": "H",
    "esr": "ohm",
    "r_dc": "ohm",
    "resistance": "ohm",
    "resistance2": "ohm",
    "line_resistance": "ohm",
    "leakage_resistance": "ohm",
    "insulation_resistance": "ohm",
    "core_loss_resistance": "ohm",
    "rated_voltage": "V",
    "v50": "V",
    "rated_current": "A",
    "skin_corner": "Hz",
    "loss_corner": "Hz",
    "relaxation_frequency": "Hz",
    "c_reference_frequency": "Hz",
    "cole_alpha": None,
    "loss_tangent": None,
    "mode_c_ratio": None,
    "mode_l_ratio": None,
    "mode_r_ratio": None,
    "core_loss_exponent": None,
    "loss_exponent": None,
}
_TEXT_FIELDS = ("name", "dielectric", "technology")


def part_from_dict(d: Mapping[str, Any]) -> Part:
    """Build a part from a scenario mapping.

    ``d["type"]`` is ``mlcc``, ``bulk``, ``inductor`` or ``bead``; the other keys are the
    dataclass fields of that type, numbers in SI units or strings with SI prefixes
    (``"22u"``, ``"0.4 nH"``, ``"3m"``). Unknown keys and unreadable values raise
    :class:`PartError` naming the key.
    """
    if not isinstance(d, Mapping):
        raise PartError(f"a part must be a mapping with a 'type' key, got {type(d).__name__}")
    kind = d.get("type")
    if kind not in PART_TYPES:
        raise PartError(
            f"part type must be one of {', '.join(PART_TYPES)}, got {kind!r}",
            hint="set 'type: mlcc', 'type: bulk', 'type: inductor' or 'type: bead'",
        )
    cls = PART_TYPES[kind]
    allowed = {f.name for f in dataclasses.fields(cls)}
    kwargs: dict[str, Any] = {}
    for key, value in d.items():
        if key == "type":
            continue
        if key not in allowed:
            raise PartError(
                f"unknown key {key!r} for a part of type {kind}",
                hint=f"use only: {', '.join(sorted(allowed))}",
            )
        if key in _TEXT_FIELDS:
            kwargs[key] = str(value)
        elif value is None:
            kwargs[key] = None
        else:
            try:
                kwargs[key] = parse_quantity(value, _FIELD_UNITS.get(key), name=key)
            except QuantityError as exc:
                raise PartError(f"part of type {kind}: {exc}") from exc
    return cls(**kwargs)


# Relative lot spread (one sigma, lognormal) of each field: invented but of the size seen
# on the bench for parts of one reel (capacitance within its tolerance band, ESR wider).
DEFAULT_SPREAD: dict[str, dict[str, float]] = {
    # v50: parts of one reel lose different shares of their capacitance under bias.
    "mlcc": {"capacitance": 0.03, "esl": 0.03, "esr": 0.08, "v50": 0.06},
    "bulk": {"capacitance": 0.04, "esr": 0.08, "line_resistance": 0.1, "esl": 0.04},
    "inductor": {"inductance": 0.04, "r_dc": 0.05, "winding_capacitance": 0.06},
    "bead": {"inductance": 0.05, "resistance": 0.08, "capacitance": 0.06, "r_dc": 0.05},
}


def _spread_value(key: str, value: Any) -> float:
    if isinstance(value, str) and value.strip().endswith("%"):
        try:
            return float(value.strip()[:-1]) / 100.0
        except ValueError:
            pass
    elif isinstance(value, (int, float)) and not isinstance(value, bool):
        return float(value)
    raise PartError(
        f"spread of {key!r} must be a fraction (0.05) or a percentage ('5%'), got {value!r}"
    )


def with_spread(part: Part, rng: np.random.Generator, spread: Mapping[str, Any]) -> Part:
    """A sample of ``part`` with each named field multiplied by a lognormal factor.

    ``spread`` maps field names to a relative one-sigma spread (``0.05`` or ``"5%"``);
    fields not named keep their value. ``rng`` (``numpy.random.default_rng(seed)``) makes
    the draw repeatable. Lognormal factors keep every value positive.
    """
    changes: dict[str, float] = {}
    allowed = {f.name for f in dataclasses.fields(part)}
    for key in sorted(spread):
        if key not in allowed or key in _TEXT_FIELDS:
            numeric = sorted(allowed - set(_TEXT_FIELDS))
            raise PartError(
                f"cannot spread {key!r} of {type(part).__name__} {part.name!r}",
                hint=f"spread only numeric fields: {', '.join(numeric)}",
            )
        sigma = _spread_value(key, spread[key])
        if sigma < 0:
            raise PartError(f"spread of {key!r} must be 0 or more, got {sigma!r}")
        value = getattr(part, key)
        if value is None and key == "v50" and hasattr(part, "v50_volts"):
            value = part.v50_volts  # the dielectric's default, spread like a given one
        if value is None:
            continue
        changes[key] = float(value) * float(np.exp(rng.normal(0.0, sigma)))
    return dataclasses.replace(part, **changes)
