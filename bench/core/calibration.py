"""Software calibration from raw standards, in memory, with scikit-rf.

The analyser sweeps with its own correction off and zbench corrects in software, so
the raw sweeps of every standard can be stored and any run re-processed later.
Three methods (docs/design.md §4):

* ``"through"``: through-response normalisation. S21 and S12 are divided by the
  through; this removes the transmission tracking (cable loss and delay, the fall of
  the through level with series resistors) but not the mismatch or directivity, and
  leaves S11 and S22 raw. It needs only a through and is the quiet choice at low
  frequency, where the cables are short against the wavelength.
* ``"solt"``: full two-port SOLT (twelve-term) correction with
  :class:`skrf.calibration.SOLT` from short, open, load (each on both cable ends) and a
  through (cables joined).
* ``"hybrid"``: below ``crossover_hz`` the through response corrected for the port
  match (:func:`match_corrected`, the default ``low_band="match"``) or the plain
  through response (``low_band="through"``); SOLT at and above the crossover.

Why the plain through response is not enough for a shunt part. A milliohm part
presents S11 ≈ −1 to both ports while the through presents ≈ 0, so the ports' source
and load match enter the through-normalised S21 at first order: the part sees the
parallel source-load impedance ``Zs‖Zl`` rather than ``Z0/2``, and its impedance reads
off by about ``−(Γs + Γl)·Z0/(Z0 + Rs)`` (1 to 3 % for ports matched to −35 to −40 dB
without series resistors). :func:`match_corrected` takes the source match and load
match from the short, open, load and through already measured for SOLT and puts them
back, with no reflection of the part in the correction (see its docstring).

The standards' own definitions. SOLT and the match-corrected band solve the error terms
against what the standards are, so a kit taken for ideal leaves its definitions in every
point: a 50.2 Ω load taken for 50 Ω reads a low-impedance part 0.4 % low in both bands.
:class:`CalibrationKit` holds a kit's data-sheet values and :func:`kit_standards` turns
them into the ``ideals`` argument.

The hand-over at the crossover. On a part that is a true shunt element at the
standards' plane, the match-corrected band and SOLT are the same equation (see
:func:`match_corrected`): with the kit given they agree to rounding (about 1e-11 on the
simulated demo bench without noise), so a hybrid with ``low_band="match"`` has no step
of its own. What a single sweep shows at the crossover is that sweep's noise: a 22 µF
MLCC near 1 MHz is a few mΩ, S21 ≈ −80 dB, and against a −100 dB floor each point
scatters by a few percent whichever band it is in. Steps that remain physically:
``low_band="through"`` keeps the ports' match below the crossover, a step of about
``(Γs + Γl)·Z0/(Z0 + Rs)`` (0.75 % and −0.8° on the demo bench's draws without
resistors, 0.07 % and −0.09° behind 499 Ω), which is why it is the default only with
resistors; and a fixture whose part is not a pure shunt at the standards' plane (a
length of line or a series pad path between the connectors and the part) breaks
``S11 = S22 = S21 − 1``, so the low band then differs from SOLT by the match terms
times that departure, which grows with frequency and is the reason the crossover sits
low (not quantified here; the simulator's fixture is a pure shunt).

All arrays are two-port S-parameters of shape (nf, 2, 2) on the frequency grid ``f``
(Hz), scikit-rf's convention. No files are read or written here.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import Any, Literal

import numpy as np
import skrf
from numpy.typing import ArrayLike, NDArray
from skrf.calibration import SOLT

from bench.errors import InputError

ComplexArray = NDArray[np.complex128]
Method = Literal["through", "solt", "hybrid"]
METHODS: tuple[str, ...] = ("through", "solt", "hybrid")
#: What ``"hybrid"`` does below its crossover: port-match-corrected through response,
#: or the plain through response.
LOW_BANDS: tuple[str, ...] = ("match", "through")
#: Default frequency (Hz) where a hybrid calibration hands over from through-response
#: to SOLT: low enough that the cables' mismatch ripple is still negligible below it.
DEFAULT_CROSSOVER_HZ = 1e6
STANDARD_NAMES: tuple[str, ...] = ("short", "open", "load", "thru")


def _as_two_port(name: str, value: ArrayLike, nf: int) -> ComplexArray:
    array = np.asarray(value, dtype=complex)
    if array.shape != (nf, 2, 2):
        raise ValueError(
            f"{name} must be a two-port sweep of shape ({nf}, 2, 2) on the calibration's "
            f"frequency grid, got {array.shape}"
        )
    if not np.all(np.isfinite(array)):
        raise ValueError(f"{name} has NaN or infinite values; re-measure that standard")
    return array


@dataclass(frozen=True, eq=False)
class RawStandards:
    """Raw (uncorrected) sweeps of the calibration standards, each (nf, 2, 2).

    ``short``, ``open``, ``load``: that standard on both cable ends (port 1 and port 2
    at once, so S11 and S22 are the two reflections and S21/S12 the leakage);
    ``thru``: the cable ends joined. A through-only calibration needs only ``thru``.
    ``f`` in Hz, strictly increasing.
    """

    f: NDArray[np.float64]
    thru: ComplexArray | None = None
    short: ComplexArray | None = None
    open: ComplexArray | None = None
    load: ComplexArray | None = None

    def __post_init__(self) -> None:
        f = np.asarray(self.f, dtype=float)
        if f.ndim != 1 or f.size < 2 or not np.all(np.diff(f) > 0):
            raise ValueError("f must be a strictly increasing 1-D frequency grid in Hz")
        object.__setattr__(self, "f", f)
        for name in STANDARD_NAMES:
            value = getattr(self, name)
            if value is not None:
                object.__setattr__(self, name, _as_two_port(name, value, f.size))

    def missing(self, method: str) -> tuple[str, ...]:
        """Names of the standards a method needs that are not here."""
        needed = ("thru",) if method == "through" else STANDARD_NAMES
        return tuple(name for name in needed if getattr(self, name) is None)


def _network(f: NDArray[np.float64], s: ArrayLike, z0: float) -> skrf.Network:
    return skrf.Network(
        frequency=skrf.Frequency.from_f(f, unit="Hz"), s=np.asarray(s, complex), z0=z0
    )


def ideal_standards(f: ArrayLike) -> dict[str, ComplexArray]:
    """Ideal flush standards on both ports: short −1, open +1, load 0, through."""
    nf = np.asarray(f).size
    eye = np.broadcast_to(np.eye(2, dtype=complex), (nf, 2, 2)).copy()
    thru = np.zeros((nf, 2, 2), complex)
    thru[:, 0, 1] = thru[:, 1, 0] = 1.0
    return {"short": -eye, "open": eye.copy(), "load": np.zeros((nf, 2, 2), complex), "thru": thru}


@dataclass(frozen=True)
class CalibrationKit:
    """The definitions of a calibration kit's standards, as its data sheet gives them.

    Short: an inductance ``short_inductance`` (H) to ground. Open: a fringing capacitance
    ``open_capacitance`` (F). Load: ``load_resistance`` (Ω) in series with
    ``load_inductance`` (H). Each of the three may sit behind a lossless offset line of
    the reference impedance with one-way delay ``short_delay``, ``open_delay``,
    ``load_delay`` (s); the through has one-way delay ``through_delay`` (s). All values
    are ≥ 0; the defaults are ideal flush standards (short −1, open +1, load Z0).
    """

    short_inductance: float = 0.0
    open_capacitance: float = 0.0
    load_resistance: float | None = None
    load_inductance: float = 0.0
    short_delay: float = 0.0
    open_delay: float = 0.0
    load_delay: float = 0.0
    through_delay: float = 0.0

    def __post_init__(self) -> None:
        for name in (
            "short_inductance",
            "open_capacitance",
            "load_inductance",
            "short_delay",
            "open_delay",
            "load_delay",
            "through_delay",
        ):
            value = getattr(self, name)
            if not (math.isfinite(value) and value >= 0):
                raise ValueError(
                    f"calibration kit {name} must be a finite value >= 0, got {value!r}"
                )
        r = self.load_resistance
        if r is not None and not (math.isfinite(r) and r > 0):
            raise ValueError(f"calibration kit load_resistance must be > 0 ohm, got {r!r}")

    @property
    def is_ideal(self) -> bool:
        """True when every standard is the ideal flush one (the load equal to z0)."""
        return self == CalibrationKit()


def kit_standards(f: ArrayLike, kit: CalibrationKit, z0: float = 50.0) -> dict[str, ComplexArray]:
    """The standards' own responses (nf, 2, 2) on both ports, from their definitions.

    ``f`` in Hz, ``z0`` (Ω, > 0) the reference impedance. Each one-port standard of
    impedance ``Z`` behind an offset of one-way delay ``τ`` reflects
    ``Γ = e^(−2jωτ)·(Z − Z0)/(Z + Z0)`` (Pozar, *Microwave Engineering*, §2.3 and §2.5,
    lossless line of Z0 [from memory]): the short ``Z = jωL``, the open
    ``Z = 1/(jωC)`` so ``Γ = (1 − jωCZ0)/(1 + jωCZ0)``, the load ``Z = R + jωL``. These
    are the first terms of the usual kit models (open C0, short L0, a resistive load with
    its series inductance; common practice, no source). The through is a matched line:
    ``S21 = S12 = e^(−jωτ)``, ``S11 = S22 = 0``. Leakage (S21 of a reflect) is zero.
    The result is the ``ideals`` argument of :func:`calibrate`.
    """
    ff = np.asarray(f, dtype=float)
    if not (math.isfinite(z0) and z0 > 0):
        raise ValueError(f"z0 must be > 0 ohm, got {z0!r}")
    w = 2 * np.pi * ff
    nf = ff.size

    def offset(delay: float) -> ComplexArray:
        return np.exp(-2j * w * delay)

    def gamma(z: ComplexArray) -> ComplexArray:
        return (z - z0) / (z + z0)

    # The open in admittance form, so a zero capacitance is exactly Γ = +1.
    y_open = 1j * w * kit.open_capacitance * z0
    r_load = z0 if kit.load_resistance is None else kit.load_resistance
    out: dict[str, ComplexArray] = {}
    for name, g in (
        ("short", gamma(1j * w * kit.short_inductance) * offset(kit.short_delay)),
        ("open", (1 - y_open) / (1 + y_open) * offset(kit.open_delay)),
        ("load", gamma(r_load + 1j * w * kit.load_inductance) * offset(kit.load_delay)),
    ):
        s = np.zeros((nf, 2, 2), dtype=complex)
        s[:, 0, 0] = s[:, 1, 1] = g
        out[name] = s
    thru = np.zeros((nf, 2, 2), dtype=complex)
    thru[:, 0, 1] = thru[:, 1, 0] = np.exp(-1j * w * kit.through_delay)
    out["thru"] = thru
    return out


def through_response(raw_dut: ArrayLike, raw_thru: ArrayLike) -> ComplexArray:
    """Through-response normalisation of a raw two-port sweep (nf, 2, 2).

    S21 and S12 are divided by the through's S21 and S12 (tracking removed); S11 and
    S22 are returned as measured. Raises ValueError for a through that is zero.
    """
    dut = np.asarray(raw_dut, dtype=complex)
    thru = np.asarray(raw_thru, dtype=complex)
    if dut.shape != thru.shape or dut.ndim != 3 or dut.shape[1:] != (2, 2):
        raise ValueError(
            f"the measurement {dut.shape} and the through {thru.shape} must both be "
            f"(nf, 2, 2) sweeps on the same grid"
        )
    for i, j in ((1, 0), (0, 1)):
        if np.any(np.abs(thru[:, i, j]) == 0):
            raise ValueError(
                f"the through's S{i + 1}{j + 1} is zero at some frequencies; "
                f"check the through adapter and re-measure it"
            )
    out = dut.copy()
    out[:, 1, 0] = dut[:, 1, 0] / thru[:, 1, 0]
    out[:, 0, 1] = dut[:, 0, 1] / thru[:, 0, 1]
    return out


def _check_same_grid(ff: NDArray[np.float64], standards: RawStandards) -> None:
    """Refuse standards measured on another frequency grid than the measurement."""
    if ff.shape != standards.f.shape or not np.allclose(ff, standards.f, rtol=1e-12, atol=0):
        raise ValueError(
            "the measurement and the standards are on different frequency grids; "
            "calibrate with the same sweep settings as the measurement"
        )


def _standard_models(
    ff: NDArray[np.float64], ideals: Mapping[str, ArrayLike] | None, *, strict: bool
) -> dict[str, ComplexArray]:
    """The standards' own responses (nf, 2, 2) by name: ideal flush standards, replaced by
    ``ideals`` where given. ``strict`` refuses a name that is no standard; otherwise the
    names a calibration does not use are passed over."""
    model = ideal_standards(ff)
    for name, value in (ideals or {}).items():
        if name not in model:
            if strict:
                raise ValueError(
                    f"unknown standard {name!r}; use one of {', '.join(STANDARD_NAMES)}"
                )
            continue
        model[name] = _as_two_port(f"ideal {name}", value, ff.size)
    return model


#: SOLT calibrations already solved, by a digest of their inputs: a run corrects every
#: sweep with the same standards. Bounded; the oldest goes first. Solved calibrations
#: are only read (``coefs``, ``apply_cal``), never changed.
_SOLVED: dict[bytes, tuple[NDArray[np.float64], SOLT]] = {}
_SOLVED_KEPT = 8


def _solt_calibration(
    f: ArrayLike,
    standards: RawStandards,
    *,
    ideals: Mapping[str, ArrayLike] | None,
    z0: float,
    isolation: bool,
) -> tuple[NDArray[np.float64], SOLT]:
    import hashlib

    ff = np.asarray(f, dtype=float)
    digest = hashlib.blake2b(repr((float(z0), bool(isolation))).encode(), digest_size=16)
    digest.update(np.ascontiguousarray(ff).tobytes())
    for name in STANDARD_NAMES:
        value = getattr(standards, name)
        digest.update(name.encode() + (b"-" if value is None else b"+"))
        if value is not None:
            digest.update(np.ascontiguousarray(value, dtype=complex).tobytes())
    for name, value in sorted((ideals or {}).items()):
        digest.update(name.encode())
        digest.update(np.ascontiguousarray(value, dtype=complex).tobytes())
    key = digest.digest()
    if key not in _SOLVED:
        while len(_SOLVED) >= _SOLVED_KEPT:
            del _SOLVED[next(iter(_SOLVED))]
        _SOLVED[key] = _solve_solt(ff, standards, ideals=ideals, z0=z0, isolation=isolation)
    return _SOLVED[key]


def _solve_solt(
    ff: NDArray[np.float64],
    standards: RawStandards,
    *,
    ideals: Mapping[str, ArrayLike] | None,
    z0: float,
    isolation: bool,
) -> tuple[NDArray[np.float64], SOLT]:
    missing = standards.missing("solt")
    if missing:
        raise ValueError(f"SOLT needs the raw {', '.join(missing)} standard(s); measure them")
    _check_same_grid(ff, standards)
    model = _standard_models(ff, ideals, strict=True)
    measured = [_network(ff, getattr(standards, name), z0) for name in STANDARD_NAMES]
    ideal = [_network(ff, model[name], z0) for name in STANDARD_NAMES]
    kwargs: dict[str, Any] = {}
    if isolation:
        kwargs["isolation"] = _network(ff, standards.load, z0)
    return ff, SOLT(measured=measured, ideals=ideal, n_thrus=1, **kwargs)


def solt(
    f: ArrayLike,
    raw_dut: ArrayLike,
    standards: RawStandards,
    *,
    ideals: Mapping[str, ArrayLike] | None = None,
    z0: float = 50.0,
    isolation: bool = False,
) -> ComplexArray:
    """Twelve-term SOLT correction of ``raw_dut`` (nf, 2, 2) with scikit-rf.

    ``ideals`` optionally gives the standards' own responses (nf, 2, 2) by name
    (``short``, ``open``, ``load``, ``thru``), e.g. an open with fringing capacitance;
    missing names are ideal flush standards. ``isolation`` uses the load sweep's S21/S12
    as the leakage terms (worth it only when the analyser's crosstalk is above its noise).
    """
    ff, cal = _solt_calibration(f, standards, ideals=ideals, z0=z0, isolation=isolation)
    dut = _as_two_port("raw_dut", raw_dut, ff.size)
    return np.asarray(cal.apply_cal(_network(ff, dut, z0)).s, dtype=complex)


@dataclass(frozen=True, eq=False)
class PortMatch:
    """The twelve-term model's transmission-side terms, each (nf,) complex.

    ``source_forward`` / ``load_forward`` (ESF, ELF) and ``tracking_forward`` (ETF)
    when port 1 drives, ``source_reverse`` / ``load_reverse`` (ESR, ELR) and
    ``tracking_reverse`` (ETR) when port 2 drives; ``isolation_forward`` /
    ``isolation_reverse`` (EXF, EXR) are zero unless the isolation terms were used.
    The load-match terms include the analyser's switch terms.
    """

    source_forward: ComplexArray
    load_forward: ComplexArray
    tracking_forward: ComplexArray
    isolation_forward: ComplexArray
    source_reverse: ComplexArray
    load_reverse: ComplexArray
    tracking_reverse: ComplexArray
    isolation_reverse: ComplexArray

    def source_load_impedance(self, z0: float = 50.0) -> ComplexArray:
        """``Zs‖Zl`` (Ω, (nf,)) a shunt part sees in the forward direction, from
        ``Zs = Z0(1 + ESF)/(1 − ESF)`` and ``Zl = Z0(1 + ELF)/(1 − ELF)``."""
        a, b = self.source_forward, self.load_forward
        return 0.5 * z0 * (1 + a) * (1 + b) / (1 - a * b)


def port_match(
    f: ArrayLike,
    standards: RawStandards,
    *,
    ideals: Mapping[str, ArrayLike] | None = None,
    z0: float = 50.0,
    isolation: bool = False,
) -> PortMatch:
    """The source match, load match, tracking and isolation terms of the twelve-term
    model, solved by scikit-rf's SOLT from the raw standards (same arguments as
    :func:`solt`)."""
    ff, cal = _solt_calibration(f, standards, ideals=ideals, z0=z0, isolation=isolation)
    return _port_match_of(cal, ff.size)


def _port_match_of(cal: SOLT, nf: int) -> PortMatch:
    coefs = cal.coefs
    zero = np.zeros(nf, dtype=complex)

    def term(name: str) -> ComplexArray:
        value = coefs.get(name)
        return zero.copy() if value is None else np.asarray(value, dtype=complex).reshape(-1)

    return PortMatch(
        source_forward=term("forward source match"),
        load_forward=term("forward load match"),
        tracking_forward=term("forward transmission tracking"),
        isolation_forward=term("forward isolation"),
        source_reverse=term("reverse source match"),
        load_reverse=term("reverse load match"),
        tracking_reverse=term("reverse transmission tracking"),
        isolation_reverse=term("reverse isolation"),
    )


def _shunt_s21(
    raw: ComplexArray,
    tracking: ComplexArray,
    isolation: ComplexArray,
    a: ComplexArray,
    b: ComplexArray,
) -> ComplexArray:
    # Twelve-term forward transmission (scikit-rf's TwelveTerm; Rehnmark's model):
    #   S21m − EXF = ETF·S21 / [(1 − ESF·S11)(1 − ELF·S22) − ESF·ELF·S21·S12].
    # A shunt element is reciprocal and symmetric with S11 = S22 = S21 − 1, so the
    # denominator is (1 + a)(1 + b) − S21·(a + b + 2ab), linear in S21, and
    #   S21 = m·(1 + a)(1 + b) / (ETF + m·(a + b + 2ab)),   m = S21m − EXF.
    m = raw - isolation
    return m * (1 + a) * (1 + b) / (tracking + m * (a + b + 2 * a * b))


def match_corrected(
    f: ArrayLike,
    raw_dut: ArrayLike,
    standards: RawStandards,
    *,
    ideals: Mapping[str, ArrayLike] | None = None,
    z0: float = 50.0,
    isolation: bool = False,
) -> ComplexArray:
    """Through response corrected for the ports' source and load match, for a shunt part.

    S21 and S12 come from the twelve-term model's transmission equation (source match,
    load match and transmission tracking from the short, open, load and through, as
    SOLT solves them) with the part's own reflections taken from the shunt relation
    ``S11 = S22 = S21 − 1`` that the shunt-through conversion assumes anyway, instead of
    from its measured S11 and S22. In impedance terms this is exactly
    ``Z = (Zs‖Zl)·S21′/(1 − S21′)`` with S21′ normalised to the through and ``Zs``,
    ``Zl`` the ports' source and load impedances (:meth:`PortMatch.source_load_impedance`):
    the part is converted with the impedance it really sees instead of ``Z0/2``.

    On a true shunt element it equals full SOLT; unlike SOLT, the trace noise of the
    part's reflections (S11 ≈ −1 for a milliohm part) does not enter S21, which matters
    when the reflections are read through a weak reflection tracking (port series
    resistors). S11 and S22 are returned as SOLT corrects them. Same arguments as
    :func:`solt`; S (nf, 2, 2) referred to ``z0`` at the standards' plane.
    """
    ff, cal = _solt_calibration(f, standards, ideals=ideals, z0=z0, isolation=isolation)
    dut = _as_two_port("raw_dut", raw_dut, ff.size)
    return _solt_and_match(cal, ff, dut, z0)[1]


def _solt_and_match(
    cal: SOLT, f: NDArray[np.float64], dut: ComplexArray, z0: float
) -> tuple[ComplexArray, ComplexArray]:
    """(SOLT-corrected S, match-corrected S) of one raw sweep with one solved calibration."""
    terms = _port_match_of(cal, f.size)
    full = np.asarray(cal.apply_cal(_network(f, dut, z0)).s, dtype=complex)
    out = full.copy()
    out[:, 1, 0] = _shunt_s21(
        dut[:, 1, 0],
        terms.tracking_forward,
        terms.isolation_forward,
        terms.source_forward,
        terms.load_forward,
    )
    out[:, 0, 1] = _shunt_s21(
        dut[:, 0, 1],
        terms.tracking_reverse,
        terms.isolation_reverse,
        terms.source_reverse,
        terms.load_reverse,
    )
    return full, out


def calibrate(
    f: ArrayLike,
    raw_dut: ArrayLike,
    standards: RawStandards,
    method: str = "through",
    *,
    crossover_hz: float = DEFAULT_CROSSOVER_HZ,
    low_band: str = "match",
    ideals: Mapping[str, ArrayLike] | None = None,
    z0: float = 50.0,
    isolation: bool = False,
) -> ComplexArray:
    """Corrected two-port S (nf, 2, 2) of ``raw_dut`` by ``method`` (see the module doc).

    ``crossover_hz`` (Hz, > 0) and ``low_band`` are used by ``"hybrid"`` only: points
    at or above the crossover get SOLT, points below it :func:`match_corrected`
    (``low_band="match"``, referred to ``z0`` at the standards' plane like SOLT) or the
    plain through response (``"through"``, on the through's own scale). Raises
    :class:`InputError` for an unknown method or low band or missing standards,
    ValueError for arrays of the wrong shape.
    """
    if method not in METHODS:
        raise InputError(
            f"unknown calibration method {method!r}", hint=f"use one of {', '.join(METHODS)}"
        )
    missing = standards.missing(method)
    if missing:
        raise InputError(
            f"calibration method {method!r} needs the raw {', '.join(missing)} standard(s), "
            f"which were not measured",
            hint="add them to the calibration step, or use method 'through'",
        )
    ff = np.asarray(f, dtype=float)
    dut = _as_two_port("raw_dut", raw_dut, ff.size)
    if method == "through":
        return through_response(dut, standards.thru)
    if method == "solt":
        return solt(ff, dut, standards, ideals=ideals, z0=z0, isolation=isolation)
    if not (math.isfinite(crossover_hz) and crossover_hz > 0):
        raise InputError(
            f"crossover_hz = {crossover_hz!r} is not a frequency",
            hint="give the hybrid crossover in Hz, e.g. 1 MHz",
        )
    if low_band not in LOW_BANDS:
        raise InputError(
            f"unknown low band {low_band!r} for the hybrid calibration",
            hint=f"use one of {', '.join(LOW_BANDS)}",
        )
    low = ff < crossover_hz
    if low_band == "match":
        ff, cal = _solt_calibration(ff, standards, ideals=ideals, z0=z0, isolation=isolation)
        full, out = _solt_and_match(cal, ff, dut, z0)
        out[~low] = full[~low]
        return out
    out = solt(ff, dut, standards, ideals=ideals, z0=z0, isolation=isolation)
    out[low] = through_response(dut[low], standards.thru[low])
    return out


def through_mismatch_bias(port_match_db: float, z0: float = 50.0, series_r: float = 0.0) -> float:
    """Largest relative impedance error (fraction) a plain through response leaves on a
    part well below ``(Z0 + Rs)/2``, for raw port matches of ``port_match_db`` (dB,
    < 0) at both ports: ``(|Γ1| + |Γ2|)·Z0/(Z0 + Rs)``.

    The part sees ``Zs‖Zl`` instead of ``(Z0 + Rs)/2``; with ``Zs ≈ Rs + Z0(1 + 2Γ1)``
    and ``Zl ≈ Rs + Z0(1 + 2Γ2)``, ``Zs‖Zl ≈ ((Z0 + Rs)/2)(1 + (Γ1 + Γ2)·Z0/(Z0 + Rs))``
    to first order (the resistors dilute the analyser's match). ``z0`` and ``series_r``
    in Ω.
    """
    if not (math.isfinite(port_match_db) and port_match_db < 0):
        raise ValueError(f"port_match_db must be a negative number of dB, got {port_match_db!r}")
    if not (z0 > 0 and series_r >= 0):
        raise ValueError(f"need z0 > 0 and series_r >= 0 ohm, got {z0!r} and {series_r!r}")
    gamma = 10 ** (port_match_db / 20)
    return 2 * gamma * z0 / (z0 + series_r)


# --- checking a stored calibration against a new plan --------------------------------


@dataclass(frozen=True, eq=False)
class CalibrationSettings:
    """The sweep settings a calibration is valid for.

    ``f`` (Hz) the frequency grid, ``if_bandwidth_hz`` (Hz), ``power_dbm`` (dBm),
    ``series_r`` (Ω, at each port), ``z0`` (Ω), ``method``. None means "not recorded".
    """

    f: NDArray[np.float64]
    if_bandwidth_hz: float | None = None
    power_dbm: float | None = None
    series_r: float = 0.0
    z0: float = 50.0
    method: str | None = None
    extra: Mapping[str, Any] = field(default_factory=dict)

    def __post_init__(self) -> None:
        object.__setattr__(self, "f", np.asarray(self.f, dtype=float))

    def to_dict(self) -> dict[str, Any]:
        """Plain values (lists and numbers) for a manifest."""
        return {
            "f": self.f.tolist(),
            "if_bandwidth_hz": self.if_bandwidth_hz,
            "power_dbm": self.power_dbm,
            "series_r": self.series_r,
            "z0": self.z0,
            "method": self.method,
            **dict(self.extra),
        }

    @classmethod
    def from_dict(cls, data: Mapping[str, Any]) -> CalibrationSettings:
        """Inverse of :meth:`to_dict`; unknown keys are kept in ``extra``."""
        known = {"f", "if_bandwidth_hz", "power_dbm", "series_r", "z0", "method"}
        if "f" not in data:
            raise InputError(
                "calibration settings have no frequency grid 'f'",
                hint="re-run the calibration step so its settings are recorded",
            )
        return cls(
            f=np.asarray(data["f"], dtype=float),
            if_bandwidth_hz=data.get("if_bandwidth_hz"),
            power_dbm=data.get("power_dbm"),
            series_r=float(data.get("series_r", 0.0) or 0.0),
            z0=float(data.get("z0", 50.0) or 50.0),
            method=data.get("method"),
            extra={k: v for k, v in data.items() if k not in known},
        )


def _describe_grid(f: NDArray[np.float64]) -> str:
    if f.size == 0:
        return "no points"
    return f"{f.size} points {f[0]:g} Hz to {f[-1]:g} Hz"


def settings_differences(
    stored: CalibrationSettings, planned: CalibrationSettings, *, rel_tol: float = 1e-6
) -> tuple[str, ...]:
    """What differs between a stored calibration and a new plan, one sentence each.

    Frequencies must match point by point (within ``rel_tol``); IF bandwidth, power,
    series resistors and z0 must be equal (within ``rel_tol``) when both are recorded.
    An empty tuple means the calibration can be reused.
    """
    out: list[str] = []
    fs, fp = stored.f, planned.f
    if fs.shape != fp.shape or not np.allclose(fs, fp, rtol=rel_tol, atol=0.0):
        out.append(
            f"frequency grid: the calibration has {_describe_grid(fs)}, "
            f"the plan {_describe_grid(fp)}"
        )
    pairs = [
        ("IF bandwidth", "Hz", stored.if_bandwidth_hz, planned.if_bandwidth_hz),
        ("source power", "dBm", stored.power_dbm, planned.power_dbm),
        ("port series resistors", "ohm", stored.series_r, planned.series_r),
        ("reference impedance z0", "ohm", stored.z0, planned.z0),
    ]
    for label, unit, a, b in pairs:
        if a is None or b is None:
            continue
        if not math.isclose(float(a), float(b), rel_tol=rel_tol, abs_tol=1e-12):
            out.append(f"{label}: the calibration has {a:g} {unit}, the plan {b:g} {unit}")
    return tuple(out)


def check_calibration_settings(
    stored: CalibrationSettings, planned: CalibrationSettings, *, source: str = "calibration"
) -> None:
    """Raise :class:`InputError` listing every difference, or return when reusable."""
    differences = settings_differences(stored, planned)
    if differences:
        raise InputError(
            "the stored calibration does not match this plan:\n  - " + "\n  - ".join(differences),
            path=source,
            hint="calibrate again with the plan's settings, or change the plan to the "
            "calibration's settings",
        )


def one_port(
    f: ArrayLike,
    raw_s11: ArrayLike,
    standards: RawStandards,
    *,
    ideals: Mapping[str, ArrayLike] | None = None,
    z0: float = 50.0,
) -> ComplexArray:
    """Three-term (directivity, source match, reflection tracking) correction of a raw
    port-1 reflection ``raw_s11`` (nf,) from the short, open and load measured on port 1,
    with :class:`skrf.calibration.OnePort`. ``ideals`` as for :func:`solt` (the port-1
    term of each two-port ideal is used). Returns the corrected Γ (nf,)."""
    from skrf.calibration import OnePort

    ff = np.asarray(f, dtype=float)
    names = ("short", "open", "load")
    missing = [n for n in names if getattr(standards, n) is None]
    if missing:
        raise ValueError(f"a one-port calibration needs the raw {', '.join(missing)} standard(s)")
    _check_same_grid(ff, standards)
    model = _standard_models(ff, ideals, strict=False)
    measured = [_network(ff, getattr(standards, n)[:, :1, :1], z0) for n in names]
    ideal = [_network(ff, model[n][:, :1, :1], z0) for n in names]
    cal = OnePort(measured=measured, ideals=ideal)
    dut = np.asarray(raw_s11, dtype=complex).reshape(-1, 1, 1)
    return cal.apply_cal(_network(ff, dut, z0)).s[:, 0, 0]
