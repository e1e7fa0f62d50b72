"""Raw sweeps of a run folder to corrected data: the stored calibration applied, the
mount's short and open captures turned into what is removed from each part, the ground
loop checked, and a sample's impedance with its window and uncertainty.

Used by the steps while a run goes (live results) and by :mod:`bench.procedure.processing`
when it builds the :class:`~bench.results.RunSummary`; it reads only ``raw/`` and the plan.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np

from bench.core.calibration import (
    DEFAULT_CROSSOVER_HZ,
    RawStandards,
    calibrate,
    through_response,
)
from bench.core.conversions import shunt_through_rereference, shunt_through_z
from bench.core.fixture import MountOpen, fit_mount, fit_open
from bench.core.impedance import ImpedanceData, impedance_from_shunt_through
from bench.core.window import floor_on_through_db
from bench.errors import RunError
from bench.procedure.plan import Analysis, Plan
from bench.runstore import DONE, RunStore
from bench.units import format_si


@dataclass(frozen=True)
class OpenResult:
    """The open (empty-mount) capture of one position: the fitted pads, or why not used.

    ``mount_open`` is the fitted :class:`bench.core.fixture.MountOpen` (None when the
    capture is out of the set-up's reach or does not look like an empty mount);
    ``message`` says which, in plain words.
    """

    position: int
    mount_open: MountOpen | None
    message: str

    def record(self) -> dict[str, Any]:
        """Plain SI numbers for the manifest and the summary's set-up."""
        m = self.mount_open
        if m is None:
            return {"capacitance_f": None, "note": self.message}
        return {
            "capacitance_f": m.c,
            "capacitance_sigma_f": m.c_sigma,
            "shunt_r_ohm": 1.0 / m.g if m.g > 0 else None,
            "points": m.points_used,
            "from_hz": m.f_min,
            "to_hz": m.f_max,
            "note": self.message,
        }


@dataclass(frozen=True)
class GroundLoopResult:
    """The ground-loop verdict on one position's mount short."""

    position: int
    detected: bool
    valid_above_hz: float
    message: str


def averaged(store: RunStore, step_id: str) -> tuple[np.ndarray, np.ndarray]:
    """Frequencies and the mean complex S (nf, 2, 2) of the sweeps stored for a step."""
    files = store.step_files(step_id)
    if not files:
        raise RunError(
            f"step {step_id} is marked done but lists no raw sweep; "
            "run it again with zbench run --resume after marking it pending"
        )
    f0, s_sum = store.read_raw(files[0])
    for name in files[1:]:
        f, s = store.read_raw(name)
        if f.shape != f0.shape or not np.allclose(f, f0, rtol=1e-9):
            raise RunError(f"sweeps of step {step_id} are on different frequency grids ({name})")
        s_sum = s_sum + s
    return f0, s_sum / len(files)


class Corrector:
    """Applies the run's calibration (from its stored raw standards) to raw sweeps."""

    def __init__(
        self,
        plan: Plan,
        standards: dict[str, tuple[np.ndarray, np.ndarray]],
        *,
        low_band: str | None = None,
    ):
        self.plan = plan
        self.standards = standards
        self.f = next(iter(standards.values()))[0]
        #: What a hybrid calibration does below its crossover (``"match"`` or
        #: ``"through"``, see :func:`bench.core.calibration.calibrate`).
        self.low_band = low_band or self.default_low_band(plan)
        self.warnings: list[str] = []
        if plan.calibration.method == "through":
            self.warnings.append(self.through_warning(plan))

    #: Raw port match (dB) the through-only warning quotes as its example.
    EXAMPLE_PORT_MATCH_DB = -40.0

    @staticmethod
    def default_low_band(plan: Plan) -> str:
        """``"match"`` without port series resistors, ``"through"`` with them.

        Without resistors the plain through response leaves the ports' match in S21
        (1 to 3 % on a milliohm part) and the match correction removes it at no cost in
        noise. With resistors the analyser's match is diluted by ``Z0/(Z0 + Rs)`` (about
        0.2 %), while the match terms, read through the resistors' weak reflection
        tracking, are noisy enough that correcting with them adds more error than they
        remove: the plain through response is then the better low band.
        """
        return "through" if plan.fixture.series_r > 0 else "match"

    @classmethod
    def through_warning(cls, plan: Plan) -> str:
        """The run-summary note of a through-only calibration: its mismatch bias."""
        from bench.core.calibration import through_mismatch_bias

        z0, series_r = plan.fixture.z0, plan.fixture.series_r
        bias = through_mismatch_bias(cls.EXAMPLE_PORT_MATCH_DB, z0, series_r)
        remedy = (
            "measure short, open and load too and use calibration method hybrid, which "
            "corrects the match below its crossover"
            if series_r <= 0
            else "the port series resistors already dilute it by Z0/(Z0 + Rs)"
        )
        return (
            "through calibration: the analyser's raw port match stays in S21, so "
            "low-impedance parts read off by up to (|Γ1| + |Γ2|)·Z0/(Z0 + Rs), "
            f"{bias:.1%} with ports matched to {cls.EXAMPLE_PORT_MATCH_DB:g} dB on this "
            f"set-up (Z0 {z0:g} Ω, Rs {series_r:g} Ω); {remedy}"
        )

    @classmethod
    def from_store(cls, store: RunStore, plan: Plan) -> Corrector:
        standards = {}
        for std in plan.calibration.standards:
            step_id = f"calibrate/{std}"
            if store.step_state(step_id) != DONE:
                raise RunError(f"calibration standard {std} was not measured (step {step_id})")
            standards[std] = averaged(store, step_id)
        return cls(plan, standards)

    def _check_grid(self, f: np.ndarray) -> None:
        if f.shape != self.f.shape or not np.allclose(f, self.f, rtol=1e-9):
            raise RunError(
                "a sweep and the calibration are on different frequency grids; "
                "calibrate again with the procedure's sweep"
            )

    def correct(self, f: np.ndarray, s_raw: np.ndarray) -> np.ndarray:
        """Calibrated S (nf, 2, 2); with a through-only calibration only S21 is meaningful."""
        self._check_grid(f)
        raw = {("thru" if k == "through" else k): v[1] for k, v in self.standards.items()}
        standards = RawStandards(f=self.f, **raw)
        kwargs: dict[str, Any] = {"z0": self.plan.fixture.z0}
        if self.plan.calibration.crossover_hz is not None:
            kwargs["crossover_hz"] = self.plan.calibration.crossover_hz
        if self.plan.calibration.method == "hybrid":
            kwargs["low_band"] = self.low_band
        if self.plan.calibration.method != "through":
            kwargs["ideals"] = self.ideals
        return calibrate(f, s_raw, standards, self.plan.calibration.method, **kwargs)

    @property
    def ideals(self) -> dict[str, np.ndarray]:
        """The standards' own responses on the calibration grid, from the procedure's
        ``calibration.kit`` (ideal flush standards when it gives none). Treating a real
        kit as ideal leaves its definitions in every corrected point: a 50.2 Ω load read
        as 50 Ω scales a low-impedance part's |Z| by 50/50.2 (−0.4 %)."""
        from bench.core.calibration import kit_standards

        return kit_standards(self.f, self.plan.calibration.kit, self.plan.fixture.z0)

    def through_band(self, f: np.ndarray) -> np.ndarray:
        """True at the points :meth:`correct` leaves on the through's own scale (plain
        through response); the rest are referred to Z0 at the standards' plane (SOLT and
        the match-corrected band of a hybrid)."""
        method = self.plan.calibration.method
        if method == "through":
            return np.ones(f.shape, dtype=bool)
        if method == "solt" or self.low_band == "match":
            return np.zeros(f.shape, dtype=bool)
        crossover = self.plan.calibration.crossover_hz
        return f < (DEFAULT_CROSSOVER_HZ if crossover is None else crossover)

    def setup_s21(self, f: np.ndarray, corrected: np.ndarray) -> np.ndarray:
        """S21 of a corrected sweep on the set-up's scale ``2Z/(2Z + Z0 + Rs)``.

        A through normalisation taken with the port series resistors fitted keeps them in
        the path, so each port presents ``Ze = Z0 + Rs`` to the part. A SOLT taken with
        them fitted moves the reference plane past them, to where the standards were, so
        its S21 is ``2Z/(2Z + Z0)``: those points are put back on the ``Z0 + Rs`` scale,
        which is the one the window, the uncertainty and the conversion to Z use.
        """
        s21 = np.array(corrected[:, 1, 0], dtype=complex)
        series_r = self.plan.fixture.series_r
        if series_r <= 0:
            return s21
        z0 = self.plan.fixture.z0
        solt = ~self.through_band(f)
        s21[solt] = shunt_through_rereference(s21[solt], z0, z0 + series_r)
        return s21

    def one_port(self, f: np.ndarray, s_raw: np.ndarray) -> np.ndarray:
        """Port-1 reflection Γ (nf,) of a raw sweep, corrected by the short, open and load
        (three-term one-port calibration with the procedure's kit definitions)."""
        from bench.core.calibration import one_port

        self._check_grid(f)
        raw = {k: v[1] for k, v in self.standards.items() if k in ("short", "open", "load")}
        missing = [k for k in ("short", "open", "load") if k not in raw]
        if missing:
            raise RunError(
                f"a reflection needs the short, open and load standards; {', '.join(missing)} "
                "not measured"
            )
        return one_port(
            f,
            s_raw[:, 0, 0],
            RawStandards(f=self.f, **raw),
            ideals=self.ideals,
            z0=self.plan.fixture.z0,
        )

    def quick(self, f: np.ndarray, s_raw: np.ndarray) -> np.ndarray:
        """Through-response correction only: a fast first look (live results), not the
        run's calibration, which :meth:`correct` applies."""
        self._check_grid(f)
        return through_response(s_raw, self.standards["through"][1])


def mount_short_impedance(
    plan: Plan, corrector: Corrector, store: RunStore, position: int, *, quick: bool = False
) -> tuple[np.ndarray, np.ndarray]:
    """Frequencies and the shorted mount's impedance (Ω) at ``position``
    (``quick``: through-response correction only, see :meth:`Corrector.quick`)."""
    f, s = averaged(store, f"mount_short/p{position}")
    if quick:
        s21n = corrector.quick(f, s)[:, 1, 0]
    else:
        s21n = corrector.setup_s21(f, corrector.correct(f, s))
    return f, shunt_through_z(s21n, plan.fixture.z0, plan.fixture.series_r)


def mount_open_impedance(
    plan: Plan,
    analysis: Analysis,
    corrector: Corrector,
    store: RunStore,
    position: int,
    *,
    quick: bool = False,
) -> ImpedanceData:
    """The empty mount's measured impedance at ``position`` with its per-point uncertainty
    (nothing removed; ``quick``: through-response correction only)."""
    f, s = averaged(store, f"mount_open/p{position}")
    if quick:
        s21n = corrector.quick(f, s)[:, 1, 0]
    else:
        s21n = corrector.setup_s21(f, corrector.correct(f, s))
    return sample_impedance(plan, analysis, f, s21n, None)


def open_fit(
    plan: Plan,
    analysis: Analysis,
    corrector: Corrector,
    store: RunStore,
    position: int,
    z_short: np.ndarray | None = None,
    *,
    quick: bool = False,
) -> OpenResult:
    """Fit the pads' shunt C (and G) to the open capture of ``position``.

    ``z_short`` is that position's mount short on the same grid (Ω) or None; with
    ``analysis.mount == "fitted"`` its fitted ``Rm + jωLm`` is subtracted instead. The
    open's own window decides which points are used (:func:`bench.core.fixture.fit_open`).
    """
    data = mount_open_impedance(plan, analysis, corrector, store, position, quick=quick)
    short: Any = z_short
    if z_short is not None and analysis.mount == "fitted":
        short = fit_mount(data.f, z_short)
    try:
        fitted = fit_open(data.f, data.z, rel_uncertainty=data.rel_uncertainty, z_short=short)
    except ValueError as exc:
        return OpenResult(position, None, f"position {position}: open not used: {exc}")
    spread = f" ± {format_si(fitted.c_sigma, 'F')}" if np.isfinite(fitted.c_sigma) else ""
    conductance = f", shunt {format_si(1.0 / fitted.g, 'Ω')}" if fitted.g > 0 else ""
    message = (
        f"position {position}: pads {format_si(fitted.c, 'F')}{spread}{conductance} "
        f"from {fitted.points_used} points, {format_si(fitted.f_min, 'Hz')} to "
        f"{format_si(fitted.f_max, 'Hz')}"
    )
    return OpenResult(position, fitted, message)


def fixture_removal_text(shorts: bool, opens: bool) -> str:
    """What was removed from the parts' data, in plain words (the summary's set-up)."""
    if shorts and opens:
        return "mount short (series) and open (pads' shunt capacitance)"
    if shorts:
        return "mount short (series); pads' capacitance not removed"
    if opens:
        return "open (pads' shunt capacitance); no mount short"
    return "none"


#: Ground-loop checks already made in this process, by a digest of their input (the
#: mount-short step checks each short as it is captured, and the summary of the same run
#: checks the same curves again). Bounded: the oldest entries go first.
_LOOPS: dict[tuple[int, bytes], GroundLoopResult] = {}
_LOOPS_KEPT = 64


def ground_loop(f: np.ndarray, z_short: np.ndarray, position: int) -> GroundLoopResult:
    """The core's ground-loop check on one mount short (a curve checked before in this
    process is not checked again: the result is a function of ``f`` and ``z_short``)."""
    import hashlib

    from bench.core.ground_loop import check_ground_loop

    f = np.ascontiguousarray(f, dtype=float)
    z_short = np.ascontiguousarray(z_short, dtype=complex)
    digest = hashlib.blake2b(f.tobytes() + z_short.tobytes(), digest_size=16).digest()
    key = (position, digest)
    if key in _LOOPS:
        return _LOOPS[key]
    check = check_ground_loop(f, z_short)
    result = GroundLoopResult(
        position=position,
        detected=bool(check.detected),
        valid_above_hz=float(check.valid_above_hz or 0.0),
        message=str(check.message),
    )
    while len(_LOOPS) >= _LOOPS_KEPT:
        del _LOOPS[next(iter(_LOOPS))]
    _LOOPS[key] = result
    return result


def ground_loop_note(loop: GroundLoopResult, analysis: Analysis) -> str:
    """The run's one note on a ground loop found at ``loop.position``, in plain words.

    With a measured mount the loop's error leaves with the short and every point is kept;
    with a fitted mount the points below the loop's corner are not used (each sample's
    note counts them). The runner (when the short is captured) and :func:`build_summary`
    write the same text, so the run's notes give each position once.
    """
    below = format_si(loop.valid_above_hz, "Hz")
    if loop_removed_with_short(analysis):
        return (
            f"position {loop.position}: ground loop below {below}; its error is in the "
            "mount short too and is removed with it (all points kept)"
        )
    return (
        f"position {loop.position}: ground loop below {below}; a fitted mount cannot "
        "follow it, so the points below are not used in the fits"
    )


def sample_impedance(
    plan: Plan,
    analysis: Analysis,
    f: np.ndarray,
    s21n: np.ndarray,
    z_short: np.ndarray | None,
    mount_open: MountOpen | None = None,
) -> ImpedanceData:
    """The part's impedance with the mount removed, its window and uncertainty.

    ``s21n`` is on the set-up's scale (:meth:`Corrector.setup_s21`); ``z_short`` the
    shorted mount on the same grid (Ω) or None; ``mount_open`` the fitted pads, whose
    shunt admittance is removed too (docs/references.md §4), or None. The procedure's
    noise floor is the analyser's own (relative to a through without resistors); on the
    through-normalised scale it stands higher by the through level the port series
    resistors take away (:func:`bench.core.window.floor_on_through_db`).
    """
    mount: Any = z_short
    if z_short is not None and analysis.mount == "fitted":
        mount = fit_mount(f, z_short)
    return impedance_from_shunt_through(
        f,
        s21n,
        z0=plan.fixture.z0,
        series_r=plan.fixture.series_r,
        mount_short=mount,
        open_admittance=None if mount_open is None else mount_open.admittance(f),
        noise_floor_db=floor_on_through_db(
            analysis.noise_floor_db, plan.fixture.z0, plan.fixture.series_r
        ),
        trace_noise_db=analysis.trace_noise_db,
        tolerance=analysis.tolerance,
    )


def loop_removed_with_short(analysis: Analysis) -> bool:
    """Whether the cable-shield ground loop's error leaves with the mount short.

    The loop adds a series error ``R1R2/(R1 + R2 + jω(L1 + L2 + Lcm))`` that does not
    depend on what is in the mount (docs/references.md §2, first-order model), so it is in the
    shorted-mount capture as much as in the part's: subtracting the measured short point
    by point removes it, and the points below the loop's corner stay good. A fitted
    ``Rm + jωLm`` mount cannot follow it, so then those points are not used.
    """
    return analysis.mount == "measured"
