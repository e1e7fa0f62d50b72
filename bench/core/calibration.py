"""Software calibration from raw standards, in memory, with scikit-rf.

The analyser sweeps with its own correction off and zbench corrects in software, so
the raw sweeps of every standard can be stored and any run re-processed later.
Three methods (DESIGN §4):

* ``"through"``: through-response normalisation. S21 and S12 are divided by the
  through; this removes the transmission tracking (cable loss and delay, the fall of
  the through level with series resistors) but not the mismatch or directivity, and
  leaves S11 and S22 raw. It needs only a through and is the quiet choice at low
  frequency, where the cables are short against the wavelength.
* ``"solt"``: full two-port SOLT (twelve-term) correction with
  :class:`skrf.calibration.SOLT` from short, open, load (each on both cable ends) and a
  through (cables joined).
* ``"hybrid"``: the through response below ``crossover_hz`` and SOLT at and above it.

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
    ff = np.asarray(f, dtype=float)
    missing = standards.missing("solt")
    if missing:
        raise ValueError(f"SOLT needs the raw {', '.join(missing)} standard(s); measure them")
    if ff.shape != standards.f.shape or not np.allclose(ff, standards.f, rtol=1e-12, atol=0):
        raise ValueError(
            "the measurement and the standards are on different frequency grids; "
            "calibrate with the same sweep settings as the measurement"
        )
    dut = _as_two_port("raw_dut", raw_dut, ff.size)
    model = ideal_standards(ff)
    for name, value in (ideals or {}).items():
        if name not in model:
            raise ValueError(f"unknown standard {name!r}; use one of {', '.join(STANDARD_NAMES)}")
        model[name] = _as_two_port(f"ideal {name}", value, ff.size)
    measured = [_network(ff, getattr(standards, name), z0) for name in STANDARD_NAMES]
    ideal = [_network(ff, model[name], z0) for name in STANDARD_NAMES]
    kwargs: dict[str, Any] = {}
    if isolation:
        kwargs["isolation"] = _network(ff, standards.load, z0)
    cal = SOLT(measured=measured, ideals=ideal, n_thrus=1, **kwargs)
    return np.asarray(cal.apply_cal(_network(ff, dut, z0)).s, dtype=complex)


def calibrate(
    f: ArrayLike,
    raw_dut: ArrayLike,
    standards: RawStandards,
    method: str = "through",
    *,
    crossover_hz: float = DEFAULT_CROSSOVER_HZ,
    ideals: Mapping[str, ArrayLike] | None = None,
    z0: float = 50.0,
    isolation: bool = False,
) -> ComplexArray:
    """Corrected two-port S (nf, 2, 2) of ``raw_dut`` by ``method`` (see the module doc).

    ``crossover_hz`` (Hz, > 0) is used by ``"hybrid"`` only: points below it get the
    through response, points at or above it SOLT. Raises :class:`InputError` for an
    unknown method or missing standards, ValueError for arrays of the wrong shape.
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
    out = solt(ff, dut, standards, ideals=ideals, z0=z0, isolation=isolation)
    low = ff < crossover_hz
    out[low] = through_response(dut[low], standards.thru[low])
    return out


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
