"""The notebook API: load a stored measurement, get its impedance, fit, export, plot.

Thin wrappers over the core, with the same behaviour and errors as ``zbench fit``::

    from bench import api

    m = api.load("examples/mlcc_22u.s2p")              # 2-port shunt-through S
    data = api.impedance(m, mount="examples/mount_short.s2p", fmax="100 MHz")
    result = api.fit(data)                              # model="auto" picks the family
    print(result.model, result.landmarks["c_low"])      # SI units: F
    api.export_spice(result, "mlcc_22u.sub", "MLCC_22U")
    fig = api.plot(data, result)                        # |Z| and ESR with the model
    fig.savefig("mlcc_22u.png")

``api.fit("examples/bead_600r.s1p", series_r=499)`` does all of it from a path. Values may be
numbers in SI units or strings with SI prefixes (``"499"``, ``"100 MHz"``, ``"2k"``).
Bad input raises :class:`bench.errors.InputError` with the file and the fix; a fit that
cannot be made raises :class:`bench.errors.FitError`.
"""

from __future__ import annotations

import os
from datetime import datetime, timezone
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np

from bench import __version__
from bench.core.conversions import reflection_s11, series_through_s21, shunt_through_s21
from bench.core.fixture import Mount, remove_fixture
from bench.core.impedance import (
    ImpedanceData,
    impedance_as_given,
    impedance_from_reflection,
    impedance_from_series_through,
    impedance_from_shunt_through,
)
from bench.core.model_registry import MODEL_KINDS as _REGISTRY_KINDS
from bench.core.model_registry import MODEL_NAMES as _REGISTRY_NAMES
from bench.core.window import check_method
from bench.errors import FitError, InputError
from bench.files import atomic_write_text
from bench.touchstone import (
    MIN_POINTS,
    Measurement,
    check_method_for_ports,
    interpolate_to,
    load_measurement,
)
from bench.units import QuantityError, parse_quantity

if TYPE_CHECKING:  # matplotlib loads only when a plot is drawn
    from matplotlib.figure import Figure

PathLike = str | os.PathLike[str]

#: Family of parts each model describes, from the one registry of model families;
#: ``auto`` chooses among those of the data's kind.
MODEL_KINDS: dict[str, str] = dict(_REGISTRY_KINDS)
MODEL_NAMES = _REGISTRY_NAMES


def _quantity(value: Any, unit: str, name: str) -> float | None:
    if value is None:
        return None
    try:
        return parse_quantity(value, unit, name=name)
    except QuantityError as exc:
        raise InputError(str(exc), hint=f"write {name} like '499', '2k' or '100 MHz'") from exc


def load(path: PathLike, *, series_r: float | str = 0.0, method: str | None = None) -> Measurement:
    """Load a measurement: Touchstone (2-port S, 1-port S or Z) or an impedance CSV.

    ``series_r`` (Ω, ≥ 0) is the resistor in series at each port of a 2-port
    measurement; it sets ``Ze = z0 + series_r``. ``method`` (``shunt-through``,
    ``series-through``, ``reflection``) says how it was measured; None infers it
    (:func:`bench.touchstone.load_measurement`).
    """
    r = _quantity(series_r, "ohm", "series resistance") or 0.0
    return load_measurement(Path(path), series_r=r, method=_method(method))


def _method(method: str | None) -> str | None:
    return None if method is None else check_method(method)


def _mount_impedance(
    mount: Any, f: np.ndarray, series_r: float, method: str | None = None
) -> tuple[np.ndarray | Mount | None, str | None]:
    """The shorted mount on the grid ``f``, and the file it came from (if any)."""
    if mount is None:
        return None, None
    if isinstance(mount, Mount):
        return mount, None
    if isinstance(mount, (str, os.PathLike)):
        mount = load_measurement(Path(mount), series_r=series_r, method=method)
    if isinstance(mount, (Measurement, ImpedanceData)):
        name = str(getattr(mount, "path", "mount short"))
        mf = np.asarray(mount.f, dtype=float)
        mz = np.asarray(mount.z, dtype=complex)
        if mf.shape == f.shape and np.allclose(mf, f, rtol=1e-9, atol=0):
            return mz, name
        return interpolate_to(f, mf, mz, name=name), name
    z = np.asarray(mount, dtype=complex)
    if z.shape not in ((), f.shape):
        raise InputError(
            f"the mount short has {z.shape} values but the measurement has {f.size} points",
            hint="give the mount as a file, a Mount(r, l) or an array on the same grid",
        )
    return z, None


def impedance(
    measurement: Measurement | PathLike,
    *,
    series_r: float | str | None = None,
    mount: Any = None,
    fmin: float | str | None = None,
    fmax: float | str | None = None,
    noise_floor_db: float = -100.0,
    trace_noise_db: float | None = None,
    tolerance: float = 0.1,
    method: str | None = None,
    reflection_uncertainty: float | None = None,
) -> ImpedanceData:
    """Fixture-removed impedance with its window and per-point uncertainty.

    ``measurement`` is a :class:`Measurement` or a path. ``method`` overrides the one the
    measurement was loaded with (a one-port S file is always a reflection); an impedance
    file without a method is taken as given (no window cut, weights from its own
    scatter), with one it is judged against that method's window. ``series_r`` (Ω)
    overrides the one the measurement was loaded with. ``mount`` is a shorted-mount
    measurement (a path or a :class:`Measurement`, interpolated onto the grid; never
    extrapolated), a fitted :class:`bench.core.fixture.Mount`, or an array on the grid
    (Ω). ``fmin``/``fmax`` (Hz) keep only the points between them. ``noise_floor_db``
    (dB relative to the through), ``trace_noise_db`` (dB RMS), ``tolerance`` (fraction)
    and ``reflection_uncertainty`` (|dΓ|) describe the set-up as in
    :func:`bench.core.window.measurable_window`.
    """
    r = _quantity(series_r, "ohm", "series resistance")
    chosen = _method(method)
    if not isinstance(measurement, Measurement):
        measurement = load(measurement, series_r=r or 0.0, method=chosen)
    if r is None:
        r = measurement.series_r
    if r < 0:
        raise InputError(
            f"series resistance {r:g} Ω is negative",
            hint="give the resistor at each port, e.g. 499",
        )
    name = str(measurement.path)
    f = np.asarray(measurement.f, dtype=float)
    if measurement.kind == "s1p":
        check_method_for_ports(name, 1, chosen)
    chosen = chosen or measurement.method
    if chosen == "reflection" and r:
        raise InputError(
            "port series resistors do not apply to a reflection",
            path=name,
            hint="leave out --series-r for a one-port reflection",
        )
    short, _ = _mount_impedance(mount, f, r, chosen)
    options: dict[str, Any] = {"noise_floor_db": noise_floor_db, "tolerance": tolerance}
    if trace_noise_db is not None:
        options["trace_noise_db"] = trace_noise_db
    z0 = measurement.z0
    if measurement.s is not None:
        s = np.asarray(measurement.s, dtype=complex)
        s11, s21 = s[:, 0, 0], (s[:, 1, 0] if s.shape[1] > 1 else None)
    elif chosen is None:
        z = measurement.z if short is None else remove_fixture(measurement.z, short, f=f)
        return crop(impedance_as_given(f, z), fmin=fmin, fmax=fmax, name=name)
    else:
        # An impedance file with a stated method: the raw quantity this Z gives on that
        # set-up, so the window and uncertainty are judged as for a measurement made there.
        s11 = reflection_s11(measurement.z, z0)
        to_s21 = series_through_s21 if chosen == "series-through" else shunt_through_s21
        s21 = to_s21(measurement.z, z0, r)
    if chosen == "reflection":
        if reflection_uncertainty is not None:
            options["reflection_uncertainty"] = reflection_uncertainty
        data = impedance_from_reflection(f, s11, z0=z0, mount_short=short, **options)
    elif chosen == "series-through":
        data = impedance_from_series_through(
            f, s21, z0=z0, series_r=r, mount_short=short, **options
        )
    else:
        data = impedance_from_shunt_through(f, s21, z0=z0, series_r=r, mount_short=short, **options)
    return crop(data, fmin=fmin, fmax=fmax, name=name)


def crop(
    data: ImpedanceData,
    *,
    fmin: float | str | None = None,
    fmax: float | str | None = None,
    name: str | None = None,
) -> ImpedanceData:
    """``data`` restricted to ``fmin`` ≤ f ≤ ``fmax`` (Hz); refuses fewer than 10 points."""
    lo = _quantity(fmin, "Hz", "fmin")
    hi = _quantity(fmax, "Hz", "fmax")
    if lo is None and hi is None:
        return data
    f = data.f
    keep = np.ones(f.shape, dtype=bool)
    if lo is not None:
        keep &= f >= lo * (1 - 1e-12)
    if hi is not None:
        keep &= f <= hi * (1 + 1e-12)
    if lo is not None and hi is not None and lo >= hi:
        raise InputError(
            f"fmin {lo:g} Hz is not below fmax {hi:g} Hz",
            path=name,
            hint="swap or widen the limits",
        )
    count = int(keep.sum())
    if count < MIN_POINTS:
        raise InputError(
            f"only {count} points lie between fmin and fmax (the data covers "
            f"{f[0]:g} Hz to {f[-1]:g} Hz); at least {MIN_POINTS} are needed",
            path=name,
            hint="widen --fmin/--fmax",
        )
    return ImpedanceData(
        f=data.f[keep],
        z=data.z[keep],
        rel_uncertainty=data.rel_uncertainty[keep],
        inside_window=data.inside_window[keep],
        window=data.window,
        z_measured=None if data.z_measured is None else data.z_measured[keep],
    )


def model_kinds() -> dict[str, str]:
    """``{model name: "capacitor" | "inductor"}`` from the core's model registry."""
    return dict(MODEL_KINDS)


def check_model_name(model: str, *, name: str | None = None) -> None:
    """Refuse a model name the core does not know, listing those it does."""
    names = [*model_kinds(), "auto"]
    if model not in names:
        raise InputError(
            f"unknown model {model!r}", path=name, hint=f"choose one of: {', '.join(names)}"
        )


def fit(
    path_or_data: ImpedanceData | Measurement | PathLike,
    *,
    model: str = "auto",
    series_r: float | str | None = None,
    mount: Any = None,
    fmin: float | str | None = None,
    fmax: float | str | None = None,
    **impedance_options: Any,
) -> Any:
    """Fit an equivalent circuit; returns the core's ``FitResult``.

    ``path_or_data`` is a path, a :class:`Measurement` or an :class:`ImpedanceData`
    (then ``series_r`` and ``mount`` must not be given; ``fmin``/``fmax`` still crop).
    ``model`` is a family name (``series-rlc``, ``two-branch``, ``ladder``, ``inductor``,
    ``bead``) or ``auto``. Points outside the window are weighted down or dropped by the
    fit, and counted in ``result.quality.points_outside_window``.
    """
    from bench.core.fitting import fit_impedance

    name = None
    if isinstance(path_or_data, ImpedanceData):
        if series_r is not None or mount is not None:
            raise InputError(
                "series_r and mount apply to a measurement, not to impedance data already computed",
                hint="pass them to api.impedance(...) instead",
            )
        data = crop(path_or_data, fmin=fmin, fmax=fmax)
    else:
        if not isinstance(path_or_data, Measurement):
            name = str(path_or_data)
        data = impedance(
            path_or_data, series_r=series_r, mount=mount, fmin=fmin, fmax=fmax, **impedance_options
        )
        name = name or str(path_or_data.path)
    check_model_name(model, name=name)
    try:
        return fit_impedance(
            data.f,
            data.z,
            model=model,
            rel_uncertainty=data.rel_uncertainty,
            valid=data.inside_window,
        )
    except FitError as exc:
        if exc.exit_code != InputError.exit_code:
            raise
        # The model asked for describes the other kind of part: bad input, not a bad fit.
        raise InputError(
            str(exc), path=name, hint="use --model auto, or a model of the data's family"
        ) from exc


def default_provenance(source: str | None = None, **extra: Any) -> dict[str, str]:
    """Provenance comments for an exported subcircuit: source, software, date, and ``extra``."""
    out = {"source": source or "(notebook)"}
    out.update({key.replace("_", " "): str(value) for key, value in extra.items()})
    out["software"] = f"zbench {__version__}"
    out["date"] = datetime.now(timezone.utc).strftime("%Y-%m-%dT%H:%M:%SZ")
    return out


def export_spice(
    result: Any, path: PathLike, name: str, *, provenance: dict[str, str] | None = None
) -> Path:
    """Write ``result`` as a SPICE ``.subckt name 1 2`` to ``path`` (atomically)."""
    from bench.core.spice import subckt_text
    from bench.exports import spice_name

    text = subckt_text(result, spice_name(name), provenance=provenance or default_provenance())
    return atomic_write_text(Path(path), text)


def plot(
    result_or_data: Any,
    other: Any = None,
    *,
    residuals: bool = False,
    title: str = "",
) -> Figure:
    """A figure of a measurement and/or its fit.

    ``plot(data)`` draws |Z| and ESR with the window; ``plot(data, result)`` (either
    order) adds the model; ``residuals=True`` draws the complex-log residuals instead
    (needs both). A path or a :class:`Measurement` is turned into data first.
    """
    from bench import plots

    data, result = result_or_data, other
    if not isinstance(data, ImpedanceData) and isinstance(other, ImpedanceData):
        data, result = other, result_or_data
    if isinstance(data, (Measurement, str, os.PathLike)):
        data = impedance(data)
    if not isinstance(data, ImpedanceData):
        raise InputError(
            "plot needs the impedance data (from api.impedance) to draw against",
            hint="call api.plot(data, result)",
        )
    if residuals:
        if result is None:
            raise InputError(
                "residuals need a fit result", hint="call api.plot(data, result, residuals=True)"
            )
        return plots.residuals_figure(data, result, title=title)
    return plots.impedance_figure(data, result, title=title)
