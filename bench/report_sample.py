"""One sample's section of the run report, and the figures it embeds.

The |Z|/ESR figure with the model and window, the residuals, landmarks and elements with
their uncertainties, the verdict against tolerance, and the SPICE text. Each figure is
saved under ``plots/`` and embedded as a base64 PNG (:class:`Figures`).
"""

from __future__ import annotations

import base64
import math
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from bench import exports, verdicts
from bench.core.robust import IN_BAND
from bench.report_html import (
    esc,
    kv_table,
    percent,
    si,
    table,
    verdict_html,
    warnings_list,
)
from bench.results import PartSpec, RunSummary, SampleResult
from bench.units import format_si

#: What a worker drawing the figures imports: this module (its task) and the plotting
#: library (a run's workers' server imports them beside the sweeps).
WORKER_MODULES = ("bench.report_sample", "bench.plots")


@dataclass(frozen=True)
class Plot:
    """A figure to draw: the :mod:`bench.plots` function named ``build``, called with
    ``args`` and ``kwargs``.

    Kept as a recipe so that :class:`Figures` can draw the report's figures in worker
    processes (the arguments are the run's picklable results), and named rather than
    held, so that making the report's text imports no plotting library: only the
    processes that draw do (half a second or more of a run's own process otherwise)."""

    build: str
    args: tuple[Any, ...] = ()
    kwargs: dict[str, Any] = field(default_factory=dict)

    def figure(self) -> Any:
        """The figure, built in this process."""
        from bench import plots

        return getattr(plots, self.build)(*self.args, **self.kwargs)


def _png(plot: Plot) -> bytes:
    """PNG bytes of one :class:`Plot` (a worker's task). Figures of one layout reuse one
    figure in each process (:func:`bench.plots.reusing_figures`): the same pixels, a
    fifth less work."""
    from bench import plots

    with plots.reusing_figures():
        return plots.png_bytes(plot.figure())


class Figures:
    """Saves each figure under ``plots/`` and embeds it as a ``<figure>``.

    :meth:`embed` returns a placeholder; :meth:`render` draws every figure, on up to
    ``jobs`` processes (all cores when None; drawing 1600 px figures is most of a
    report's time), writes the PNGs and puts each figure in place of its placeholder.
    :meth:`start` hands the drawing to the workers early, so that it runs while the
    caller does other work before :meth:`render`.
    """

    def __init__(self, run_dir: Path, jobs: int | None = None):
        self.folder = run_dir / "plots"
        self.paths: list[Path] = []
        self.jobs = jobs
        self._pending: list[tuple[str, Plot | Any, Path, str]] = []
        self._started: Any = None

    def embed(self, fig: Plot | Any, name: str, caption: str) -> str:
        """Queue ``fig`` (a :class:`Plot`, or a figure already built) for the report."""
        path = self.folder / f"{exports.safe_filename(name)}.png"
        self.paths.append(path)
        token = f"<!--zbench-figure-{len(self._pending)}-->"
        self._pending.append((token, fig, path, caption))
        return token

    @property
    def queued(self) -> list[Any]:
        """The figures queued so far (:class:`Plot` recipes or figures), in order."""
        return [fig for _, fig, _, _ in self._pending]

    def start(self) -> None:
        """Hand the figures queued so far to the worker processes now; :meth:`render`
        collects them (the caller may do other work meanwhile)."""
        from bench.parallel import start_map

        plans = [fig for _, fig, _, _ in self._pending if isinstance(fig, Plot)]
        self._started = start_map(_png, plans, self.jobs, preload=WORKER_MODULES)

    def cancel(self) -> None:
        """Stop drawing the figures handed out by :meth:`start` (they are not needed)."""
        if self._started is not None:
            self._started.cancel()
            self._started = None

    def render(self, text: str) -> str:
        """``text`` with every queued figure drawn, saved and put in place."""
        from bench.files import atomic_write_bytes

        if self._started is None:
            self.start()
        drawn = iter(self._started.results())
        for token, fig, path, caption in self._pending:
            if isinstance(fig, Plot):
                data = next(drawn)
            else:  # a figure the caller built: matplotlib is loaded already
                from bench import plots

                data = plots.png_bytes(fig)
            atomic_write_bytes(path, data)
            encoded = base64.b64encode(data).decode("ascii")
            text = text.replace(
                token,
                f'<figure><img alt="{esc(caption)}" src="data:image/png;base64,{encoded}">'
                f"<figcaption>{esc(caption)}</figcaption></figure>",
                1,
            )
        self._pending.clear()
        self._started = None
        return text


def _model_text(sample: Any) -> str:
    """The sample's model family, and its own choice when the lot's family replaced it."""
    if sample.fit is None:
        return "no fit"
    if sample.own_family:
        return f"{sample.fit.model} (set by the lot; the sample's own choice: {sample.own_family})"
    return sample.fit.model


def _setup_text(label: str, data: Any) -> str:
    """``series-through: window 13.2 Ω to 993 kΩ, 39 of 81 points inside``."""
    inside = int(np.count_nonzero(np.asarray(data.inside_window, dtype=bool)))
    w = data.window
    return (
        f"{label}: window {format_si(w.z_min, 'Ω', 3)} to {format_si(w.z_max, 'Ω', 3)}, "
        f"{inside} of {np.size(data.f)} points inside"
    )


def landmark_label(spec: PartSpec, name: str) -> str:
    """A landmark's name for a reader: ``|Z| at 100 MHz`` for a bead's stated point."""
    if name == "z_at_nominal_hz" and spec.nominal_at_hz:
        return f"|Z| at {format_si(spec.nominal_at_hz, 'Hz', 4)}"
    return name


def points_text(sample: SampleResult) -> tuple[int, int, int | None]:
    """(points in the sweep, points outside the window, points the fit used or None)."""
    total = int(np.size(sample.data.f))
    outside = int(np.count_nonzero(~np.asarray(sample.data.inside_window, dtype=bool)))
    used = sample.fit.quality.points_used if sample.fit is not None else None
    return total, outside, used


def _model_landmarks(sample: SampleResult) -> dict[str, float | None]:
    """The fitted model's own landmarks: the fit's where it took the model's value, else
    read from the model's curve on the measured grid (empty if they cannot be)."""
    from bench.core.landmarks import landmarks_for

    fit = sample.fit
    sources = dict(getattr(fit, "landmark_sources", {}) or {})
    try:
        curve = dict(landmarks_for(fit.kind, sample.data.f, fit.impedance(sample.data.f)))
    except (ValueError, FloatingPointError):
        curve = {}
    return {
        key: value if sources.get(key) == "model" else curve.get(key)
        for key, value in fit.landmarks.items()
    }


def _landmark_table(sample: SampleResult, kind: str) -> str:
    """Each landmark as the run shows it (from the data where they give it, else the
    model: :func:`bench.verdicts.shown`), the model's own value with its ±1σ, and how
    far the model lies from the data."""
    from bench.core.fit_select import relative_spread, undetermined

    fit = sample.fit
    sigma = dict(getattr(fit, "uncertainties", {}) or {})
    sigma_marks = {**sigma, **dict(getattr(fit, "landmark_uncertainties", {}) or {})}
    values, sources = verdicts.shown(sample, kind)
    model = _model_landmarks(sample)
    # A ±1σ column only when the fit states landmark uncertainties.
    with_sigma = any(sigma_marks.get(key) is not None for key in values)
    rows = []
    for key, value in values.items():
        unit = exports.LANDMARK_UNITS.get(key, "")
        own = model.get(key)
        direct = value if sources.get(key) == "data" else None
        difference = (
            percent(own / direct - 1.0)
            if own is not None and direct and math.isfinite(direct)
            else "—"
        )
        row = [esc(key), si(value, unit), esc(sources.get(key) or "—"), si(own, unit)]
        if with_sigma:
            spread = sigma_marks.get(key)
            # Beyond ±100 % (or resting on an element the data do not see) the model's
            # value is not determined by the data: the number says nothing more.
            loose = undetermined(relative_spread(own, spread))
            row.append("not determined" if loose else si(spread, unit, 3))
        rows.append([*row, difference])
    headers = ["landmark", "value", "from", "model", *(["model ±1σ"] if with_sigma else [])]
    numeric = set(range(1, len(headers) + 1)) - {2}
    landmarks = table([*headers, "model vs data"], rows, numeric=numeric)
    rows = []
    for key, value in fit.elements.items():
        unit = _element_unit(key)
        error = sigma.get(key)
        relative = (
            f"{100 * error / value:.2g} %"
            if error is not None and value and math.isfinite(error)
            else "—"
        )
        if key.startswith("tan"):  # a loss tangent: a plain number, not an SI quantity
            shown = [f"{value:.4g}", "—" if error is None else f"{error:.2g}"]
        else:
            shown = [si(value, unit), si(error, unit, 3)]
        rows.append([esc(key), *shown, esc(relative)])
    elements = table(["element", "value", "±1σ", "±1σ (relative)"], rows, numeric={1, 2, 3})
    return (
        '<div class="pair">'
        f"<div><h4>Landmarks</h4>{landmarks}</div>"
        f"<div><h4>Model elements</h4>{elements}</div></div>"
    )


def _element_unit(name: str) -> str:
    if name.lstrip("_").startswith("fc"):  # a skin corner: a frequency
        return "Hz"
    head = name.lstrip("_")[:1].upper()
    return {"R": "Ω", "L": "H", "C": "F"}.get(head, "")


def quality_text(sample: SampleResult) -> str:
    from bench.core.fit_result import noise_text

    q = sample.fit.quality
    total, outside, used = points_text(sample)
    text = (
        f"RMS complex-log error {q.rms_log_error:.3g}{noise_text(q)}, "
        f"largest {q.max_abs_log_error:.3g}; "
        f"{used} of {total} points used"
    )
    other = total - used - outside
    if outside or other > 0:
        reasons = [f"{outside} outside the measurable window"] if outside else []
        if other > 0:
            # Below a ground-loop corner, or outside a frequency range the fit was given.
            reasons.append(f"{other} outside the fit's frequency range")
        text += " (" + ", ".join(reasons) + ")"
    return text


def _fit_range_is_narrower(sample: SampleResult) -> bool:
    """Whether the fit left out an end of the sweep (``fit.f_range``, Hz): it is hatched."""
    f_range = getattr(sample.fit, "f_range", None)
    f = np.asarray(sample.data.f, dtype=float)
    if f_range is None or f.size < 2:
        return False
    lo, hi = (float(v) for v in f_range)
    return lo > f[0] * (1 + 1e-9) or hi < f[-1] * (1 - 1e-9)


def sample_section(summary: RunSummary, spec: PartSpec, sample: SampleResult, figs: Figures) -> str:
    from bench.core.spice import subckt_text

    heading = f"{sample.part} / {sample.sample}" + (
        f" at {sample.bias_v:g} V" if sample.bias_v else ""
    )
    parts = [f'<section class="sample"><h4>{esc(heading)}</h4>']
    name, value = exports.main_landmark(spec, sample)
    deviation, judged = verdicts.judge(
        spec, sample, value, summary.warnings, verdicts.plausibility_notes(summary.warnings)
    )
    unit = exports.LANDMARK_UNITS.get(name, "")
    label = esc(landmark_label(spec, name))
    drive = verdicts.sample_drive(summary, sample)
    facts = {
        "position": sample.position,
        **(
            {"set-ups": "; ".join(_setup_text(label, d) for label, d in sample.setups)}
            if sample.setups
            else {}
        ),
        "raw file": sample.raw_file or "(not recorded)",
        "model": _model_text(sample),
        "drive across the part": "not recorded"
        if drive is None
        else f"{format_si(drive, 'V', 3)} rms at most",
    }
    parts.append(kv_table(facts))
    if sample.bias_v and value is not None:
        reference = exports.zero_bias_values(summary).get((sample.part, sample.sample))
        change = None if not reference else value / reference - 1.0
        if change is not None:
            parts.append(
                f"<p>{label} = {si(value, unit)} at {esc(f'{sample.bias_v:g}')} V: "
                f"{percent(change)} from the same sample at 0 V ({si(reference, unit)}). "
                '<span class="note">Not judged under bias: the nominal value is stated '
                "at 0 V.</span></p>"
            )
        else:
            parts.append(
                f"<p>{label} = {si(value, unit)} at {esc(f'{sample.bias_v:g}')} V "
                '<span class="note">(no 0 V measurement to compare with; not judged under '
                "bias)</span></p>"
            )
    elif spec.nominal:
        tol = f" ± {100 * spec.tolerance:g} %" if spec.tolerance is not None else ""
        parts.append(
            f"<p>{label} = {si(value, unit)} against {si(spec.nominal, unit)}{esc(tol)}: "
            f"deviation {percent(deviation)}, "
            f"{verdict_html(judged.result, sample.bias_v, reason=judged.reason)}</p>"
        )
    if judged.result == "CHECK" and (sample.bias_v or not spec.nominal):
        parts.append(f"<p>{verdict_html(judged.result, reason=judged.reason)}</p>")
    caption = (
        f"{heading}: |Z| and ESR versus frequency; shaded band: measurable window; "
        "crosses: points outside it; dashed: fitted model"
    )
    if sample.fit is not None:
        caption += (
            "; lower panels: model minus measurement (complex log, magnitude in % and "
            "phase in degrees) with the ±1σ measurement band"
        )
    if sample.fit is not None and set(sample.fit.point_status) & set(IN_BAND):
        caption += (
            "; open circles: points the fit screened out (glitches, lone points out of "
            "line with the sweep, negative resistance), at a residual panel's edge when "
            "beyond its scale"
        )
    if _fit_range_is_narrower(sample):
        caption += "; hatched: ends of the sweep the fit left out"
    if len(sample.setups) > 1:
        caption += (
            "; black: the set-ups stitched into one curve, each weighted by its own "
            "uncertainty; coloured: each set-up inside its own window, whose limits are "
            "dotted in the same colour"
        )
    parts.append(
        figs.embed(
            Plot(
                "sample_figure",
                # The SRF line and label: the run's shown landmarks (bench.verdicts).
                (sample.data, verdicts.shown_fit(sample, verdicts.kind_of(spec))),
                {"title": heading, "setups": sample.setups},
            ),
            f"{sample.label}_impedance",
            caption + ".",
        )
    )
    if sample.fit is None:
        parts.append(
            f"<p><strong>No model:</strong> {esc(sample.fit_error or 'the fit failed')}</p>"
        )
        parts.append(warnings_list(sample.warnings))
        parts.append("</section>")
        return "".join(parts)
    parts.append(f"<p>Fit quality: {esc(quality_text(sample))}.</p>")
    parts.append(_landmark_table(sample, verdicts.kind_of(spec)))
    parts.append(warnings_list([*sample.warnings, *sample.fit.warnings]))
    spice = subckt_text(
        verdicts.shown_fit(sample, verdicts.kind_of(spec)),
        exports.sample_spice_name(sample),
        provenance=exports.provenance(summary, sample),
    )
    parts.append(f"<h4>SPICE subcircuit</h4><pre>{esc(spice)}</pre></section>")
    return "".join(parts)
