"""From the sweeps stored in a run folder to impedances, fits and the :class:`RunSummary`.

The runner calls this at its fit step and ``zbench reprocess`` calls it on a finished
run with other settings; both read only ``raw/`` and the manifest, never an instrument.
All the numbers come from :mod:`bench.core`; this module only finds the files, averages
repeated sweeps and hands arrays to the core.
"""

from __future__ import annotations

from dataclasses import dataclass, replace
from typing import Any

import numpy as np

from bench import __version__
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
from bench.errors import FitError, RunError
from bench.parallel import ordered_map
from bench.procedure.plan import GAIN_PHASE, SHUNT, SINGLE_MOUNT_METHODS, Analysis, Plan, Step
from bench.results import RunSummary, SampleResult
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


def ground_loop(f: np.ndarray, z_short: np.ndarray, position: int) -> GroundLoopResult:
    """The core's ground-loop check on one mount short."""
    from bench.core.ground_loop import check_ground_loop

    check = check_ground_loop(f, z_short)
    return GroundLoopResult(
        position=position,
        detected=bool(check.detected),
        valid_above_hz=float(check.valid_above_hz or 0.0),
        message=str(check.message),
    )


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


def z_at_nominal(spec: Any, data: ImpedanceData) -> float | None:
    """A bead's |Z| (Ω) at the frequency its nominal is stated at (``spec.nominal_at_hz``),
    by log-log interpolation of the measured points; None for other parts, without that
    frequency or when it lies outside the sweep."""
    if spec.kind != "bead" or not spec.nominal_at_hz:
        return None
    f = np.asarray(data.f, dtype=float)
    magnitude = np.abs(np.asarray(data.z))
    ok = np.isfinite(magnitude) & (magnitude > 0) & (f > 0)
    if np.count_nonzero(ok) < 2 or not f[ok][0] <= spec.nominal_at_hz <= f[ok][-1]:
        return None
    log_z = np.interp(np.log(spec.nominal_at_hz), np.log(f[ok]), np.log(magnitude[ok]))
    return float(np.exp(log_z))


def main_value(spec: Any, landmarks: dict[str, Any], data: ImpedanceData) -> float | None:
    """The value a part's tolerance is stated on, from the landmarks of its measured data
    (the live line, before any fit): ``c_low`` (F) for capacitors, ``l_low`` (H) for
    inductors, a bead's |Z| (Ω) at its stated frequency; None when there is none."""
    if spec.kind == "bead":
        return z_at_nominal(spec, data)
    value = landmarks.get("c_low" if spec.kind in ("mlcc", "bulk") else "l_low")
    return float(value) if isinstance(value, (int, float)) and np.isfinite(value) else None


def fit_sample(
    model: str, data: ImpedanceData, valid_above_hz: float = 0.0
) -> tuple[Any, str | None]:
    """Fit one sample; returns (FitResult or None, error text or None)."""
    try:
        from bench.core.fitting import fit_impedance
    except ImportError:
        return None, "fitting is not available in this build"
    try:
        # Points below a ground-loop corner are inside the window: left out, not counted
        # as outside it (the sample's own note counts them).
        fit = fit_impedance(
            data.f,
            data.z,
            model=model,
            rel_uncertainty=data.rel_uncertainty,
            valid=data.inside_window,
            excluded=np.asarray(data.f) < valid_above_hz,
        )
    except FitError as exc:
        return None, str(exc)
    return fit, None


def build_summary(
    store: RunStore,
    plan: Plan,
    *,
    analysis: Analysis | None = None,
    model_override: str | None = None,
    fit: bool = True,
    jobs: int | None = None,
) -> RunSummary:
    """Recompute every sample of a run from its raw sweeps into a :class:`RunSummary`.

    ``analysis`` and ``model_override`` replace the procedure's settings (reprocess);
    measure steps that were skipped or never ran are left out, and said so in warnings.
    The samples are fitted on up to ``jobs`` processes (all cores when None).
    """
    analysis = analysis or plan.analysis
    corrector = Corrector.from_store(store, plan)
    warnings: list[str] = list(corrector.warnings)
    shorts: dict[int, np.ndarray] = {}
    loops: dict[int, GroundLoopResult] = {}
    from bench.procedure import methods as single_methods

    gain_phase_shorts: dict[int, np.ndarray | None] = {}
    for step in plan.steps:
        if step.kind != "mount_short" or step.position is None:
            continue
        if step.method == GAIN_PHASE:
            z_gp = single_methods.gain_phase_short(plan, store, step.position)
            gain_phase_shorts[step.position] = z_gp
            if z_gp is None:
                warnings.append(
                    f"no gain-phase capture of the mount short at position {step.position}; "
                    "not removed from the gain-phase sweeps"
                )
            continue
        if store.step_state(step.id) != DONE:
            warnings.append(f"no mount short for position {step.position}; not removed")
            continue
        f, z_short = mount_short_impedance(plan, corrector, store, step.position)
        shorts[step.position] = z_short
        loops[step.position] = ground_loop(f, z_short, step.position)
    opens: dict[int, OpenResult] = {}
    for step in plan.steps:
        if step.kind != "mount_open" or step.position is None:
            continue
        if store.step_state(step.id) != DONE:
            warnings.append(
                f"no open capture for position {step.position}; pads' capacitance not removed"
            )
            continue
        result = open_fit(
            plan, analysis, corrector, store, step.position, shorts.get(step.position)
        )
        opens[step.position] = result
        if result.mount_open is None:
            warnings.append(result.message)
    pads = {pos: r.mount_open for pos, r in opens.items() if r.mount_open is not None}
    from bench.procedure import methods as single

    mounts = {
        m: single.captures(plan, corrector, store, m)
        for m in SINGLE_MOUNT_METHODS
        if any(s.method == m for s in plan.steps)
    }
    for m, captured in mounts.items():
        for kind, value in (("mount_open", captured.open), ("mount_short", captured.short)):
            if value is None:
                warnings.append(
                    f"no {single.CAPTURE_WORDS[(m, kind)]} capture of the {m} mount; not removed"
                )
    groups: dict[tuple[str, str, float], list[Step]] = {}
    for step in plan.steps:
        if step.kind != "measure":
            continue
        state = store.step_state(step.id)
        if state != DONE:
            warnings.append(f"{step.id}: {state}, not in the results")
            continue
        assert step.placement is not None
        key = (step.placement.part, step.placement.sample, step.bias_v)
        groups.setdefault(key, []).append(step)
    unfitted: list[tuple[SampleResult, tuple[str, ImpedanceData, float]]] = []
    shunt = {"shorts": shorts, "pads": pads, "loops": loops, "gain_phase": gain_phase_shorts}
    for steps in groups.values():
        if len(steps) == 1 and steps[0].method == SHUNT:
            unfitted.append(
                _sample(
                    store, plan, analysis, corrector, steps[0], shorts, pads, loops, model_override
                )
            )
        else:
            unfitted.append(
                _setups_sample(
                    store, plan, analysis, corrector, steps, shunt, mounts, model_override
                )
            )
    samples = [sample for sample, _ in unfitted]
    if fit:
        # The fits run on up to `jobs` processes (all cores by default), in sample order.
        fits = ordered_map(_fit_task, [task for _, task in unfitted], jobs)
        samples = [
            replace(
                sample,
                fit=result,
                fit_error=error,
                warnings=(*sample.warnings, *(getattr(result, "warnings", ()) or ())),
            )
            for sample, (result, error) in zip(samples, fits, strict=True)
        ]
    loop_info = {
        str(pos): {
            "detected": r.detected,
            "valid_above_hz": r.valid_above_hz,
            "message": r.message,
        }
        for pos, r in loops.items()
    }
    for r in loops.values():
        if r.detected:
            warnings.append(ground_loop_note(r, analysis))
    if plan.fixture.series_r > 0 and plan.calibration.method != "through":
        warnings.append(
            "SOLT with port series resistors calibrates them out: the corrected data are "
            "put back on the Z0 + Rs scale, but the correction amplifies the trace noise "
            "of the reflections through the resistors; a through calibration is the "
            "quieter choice with resistors"
        )
    manifest = store.manifest
    return RunSummary(
        run_id=store.run_id,
        procedure_name=plan.name,
        parts=tuple(p.spec for p in plan.parts),
        samples=tuple(samples),
        setup={
            "procedure": plan.source,
            "mode": plan.mode,
            "sweep": manifest["procedure"]["sweep"],
            "fixture": manifest["procedure"]["fixture"],
            "analysis": {
                "noise_floor_db": analysis.noise_floor_db,
                "trace_noise_db": analysis.trace_noise_db,
                "tolerance": analysis.tolerance,
                "mount": analysis.mount,
            },
            "fixture_removal": fixture_removal_text(bool(shorts), bool(pads)),
            **(
                {"single_mounts": {m: c.removal_text() for m, c in mounts.items()}}
                if mounts
                else {}
            ),
            **({"mount_open": {str(p): r.record() for p, r in opens.items()}} if opens else {}),
            "instruments": manifest.get("instruments", {}),
            "created": manifest.get("created"),
        },
        calibration=dict(manifest.get("calibration", {})),
        ground_loop=loop_info,
        warnings=tuple(dict.fromkeys([*_stored_warnings(manifest, opens, loops), *warnings])),
        software_version=__version__,
    )


def _stored_warnings(
    manifest: dict[str, Any],
    opens: dict[int, OpenResult],
    loops: dict[int, GroundLoopResult] | None = None,
) -> list[str]:
    """The run's own warnings, less its verdicts on the opens and ground loops processing
    has just redone (the run judged the opens before the mount short existed, and a
    reprocess may judge a loop with another mount setting)."""
    redone = tuple(f"position {pos}: open not used" for pos in opens) + tuple(
        f"position {pos}: ground loop" for pos in loops or {}
    )
    return [w for w in manifest.get("warnings", []) if not (redone and w.startswith(redone))]


def _sample(
    store: RunStore,
    plan: Plan,
    analysis: Analysis,
    corrector: Corrector,
    step: Step,
    shorts: dict[int, np.ndarray],
    pads: dict[int, MountOpen],
    loops: dict[int, GroundLoopResult],
    model_override: str | None,
) -> tuple[SampleResult, tuple[str, ImpedanceData, float]]:
    """A sample's result before its fit, and the fit's task (model, data, valid above)."""
    placement = step.placement
    assert placement is not None
    f, s_raw = averaged(store, step.id)
    corrected = corrector.correct(f, s_raw)
    s21n = corrector.setup_s21(f, corrected)
    position = step.position or 0
    data = sample_impedance(plan, analysis, f, s21n, shorts.get(position), pads.get(position))
    loop = loops.get(step.position or 0)
    detected = loop is not None and loop.detected
    removed = detected and loop_removed_with_short(analysis) and step.position in shorts
    valid_above = loop.valid_above_hz if detected and not removed else 0.0
    part = plan.part(placement.part)
    model = model_override or part.spec.model
    notes: tuple[str, ...] = ()
    if removed:
        notes = ("ground loop: removed with the measured mount short (all points kept)",)
    elif valid_above:
        # Inside the window but left out: counted here, not among the points outside it.
        inside = np.asarray(data.inside_window, dtype=bool)
        below = int(np.count_nonzero(inside & (f < valid_above)))
        notes = (
            f"ground loop: {below} point{'s' if below != 1 else ''} below "
            f"{format_si(valid_above, 'Hz')} not used (a fitted mount cannot follow the loop)",
        )
    files = store.step_files(step.id)
    sample = SampleResult(
        part=placement.part,
        sample=placement.sample,
        data=data,
        fit=None,
        bias_v=step.bias_v,
        position=placement.position,
        raw_file=files[0] if files else None,
        corrected_s=corrected,
        warnings=notes,
    )
    return sample, (model, data, valid_above)


def _fit_task(task: tuple[str, ImpedanceData, float]) -> tuple[Any, str | None]:
    """:func:`fit_sample` of one (model, data, valid above) task: a worker's job."""
    return fit_sample(*task)


def with_analysis(plan: Plan, **changes: Any) -> Analysis:
    """The plan's analysis settings with some replaced (None values are ignored)."""
    return replace(plan.analysis, **{k: v for k, v in changes.items() if v is not None})


def _setups_sample(
    store: RunStore,
    plan: Plan,
    analysis: Analysis,
    corrector: Corrector,
    steps: list[Step],
    shunt: dict[str, Any],
    mounts: dict[str, Any],
    model_override: str | None,
) -> tuple[SampleResult, tuple[str, ImpedanceData, float]]:
    """One sample measured on a single mount, or several ways and stitched into one curve
    (before its fit, and the fit's task); each set-up's data, with its own window, is
    kept in ``setups``."""
    from bench.procedure import methods as single

    first = steps[0]
    assert first.placement is not None
    setups: list[tuple[str, ImpedanceData]] = []
    notes: list[str] = []
    position: int | None = None
    corrected = None
    raw_file = None
    for step in steps:
        files = store.step_files(step.id)
        raw_file = raw_file or (files[0] if files else None)
        if step.method == SHUNT:
            r, _ = _sample(
                store,
                plan,
                analysis,
                corrector,
                step,
                shunt["shorts"],
                shunt["pads"],
                shunt["loops"],
                None,
            )
            setups.append((SHUNT, r.data))
            notes.extend(r.warnings)
            position, corrected = r.position, r.corrected_s
            continue
        f, s_raw = averaged(store, step.id)
        if step.method == GAIN_PHASE:
            z_short = shunt["gain_phase"].get(step.position or 0)
            data = single.gain_phase_impedance(plan, analysis, f, s_raw[:, 1, 0], z_short)
            setups.append((GAIN_PHASE, data))
            position = position if position is not None else step.position
            continue
        data = single.single_mount_impedance(
            plan, analysis, corrector, step.method, f, s_raw, mounts[step.method]
        )
        setups.append((step.method, data))
    data, disagreements = single.stitch_setups(setups)
    notes.extend(disagreements)
    part = plan.part(first.placement.part)
    model = model_override or part.spec.model
    sample = SampleResult(
        part=first.placement.part,
        sample=first.placement.sample,
        data=data,
        fit=None,
        bias_v=first.bias_v,
        position=position,
        raw_file=raw_file,
        corrected_s=corrected if len(setups) == 1 else None,
        warnings=tuple(dict.fromkeys(notes)),
        setups=tuple(setups),
    )
    return sample, (model, data, 0.0)
