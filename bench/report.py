"""The run report: one self-contained, printable ``report.html``.

:func:`write_report` writes ``report.html`` into the run folder with every figure
embedded as a base64 PNG (the same figures are also saved under ``plots/``), so the
file can be mailed or archived on its own. Contents, in order: the results at a glance,
the set-up and calibration, the ground-loop check, the measurable window and the points
outside it, then per part its lot (overlay, statistics, capacitance versus bias) and per
sample the |Z|/ESR figure with the model and window, the residuals, landmarks and
elements with their uncertainties, the verdict against tolerance, and the SPICE text.

Every piece of text that comes from a procedure, a file or an instrument is escaped.
"""

from __future__ import annotations

from collections.abc import Iterable
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

from bench import exports, verdicts
from bench.files import atomic_write_text
from bench.report_html import (
    CSS,
    duration,
    esc,
    kv_table,
    parse_time,
    percent,
    records_table,
    si,
    table,
    time_text,
    verdict_html,
    warnings_list,
)
from bench.report_sample import Figures, Plot, landmark_label, points_text, sample_section
from bench.results import PartSpec, RunSummary, SampleResult
from bench.units import format_si

__all__ = ["CSS", "ReportDraft", "esc", "report_html", "start_report", "write_report"]


def _outside_ranges(f: np.ndarray, outside: np.ndarray) -> list[tuple[float, float, int]]:
    """Contiguous frequency ranges of points outside the window: (f_first, f_last, count)."""
    ranges = []
    start = None
    for index, flag in enumerate(outside):
        if flag and start is None:
            start = index
        if (not flag or index == len(outside) - 1) and start is not None:
            end = index if flag else index - 1
            ranges.append((float(f[start]), float(f[end]), end - start + 1))
            start = None
    return ranges


def _window_section(summary: RunSummary) -> str:
    rows = []
    for sample in summary.samples:
        data = sample.data
        window = getattr(data, "window", None)
        z_min = getattr(window, "z_min", None)
        z_max = getattr(window, "z_max", None)
        outside = ~np.asarray(data.inside_window, dtype=bool)
        ranges = _outside_ranges(np.asarray(data.f, dtype=float), outside)
        where = "; ".join(
            f"{format_si(lo, 'Hz', 3)} ({n})"
            if n == 1
            else f"{format_si(lo, 'Hz', 3)} – {format_si(hi, 'Hz', 3)} ({n})"
            for lo, hi, n in ranges
        )
        left_out = "—" if sample.fit is None else str(sample.fit.quality.points_outside_window)
        rows.append(
            [
                esc(sample.label),
                si(_scalar(z_min), "Ω", 3),
                si(_scalar(z_max), "Ω", 3),
                str(int(outside.size)),
                str(int(outside.sum())),
                esc(where) if where else "none",
                left_out,
            ]
        )
    return (
        "<h2>Measurable window</h2>"
        '<p class="note">The impedance range the set-up resolves to its tolerance, from the '
        "noise floor (low end) and S21 approaching 1 (high end). Points outside it are "
        "dropped from the fit and marked with crosses in the figures. The fit may leave out "
        "more (points below a ground-loop corner, say): those ends of the sweep are hatched.</p>"
        + table(
            [
                "sample",
                "lowest |Z|",
                "highest |Z|",
                "points",
                "outside window",
                "where (count)",
                "left out of the fit",
            ],
            rows,
            numeric={1, 2, 3, 4, 6},
            css_class="window",
        )
    )


def _scalar(value: Any) -> float | None:
    """A window limit as one number (the tightest value when it varies with frequency)."""
    if value is None:
        return None
    array = np.asarray(value, dtype=float)
    return float(array) if array.ndim == 0 else None


_GLANCE_COLUMNS = {
    "capacitor": (("c_low", "C", "F"), ("esl", "ESL", "H"), ("srf", "SRF", "Hz"),
                  ("esr_at_srf", "ESR", "Ω")),
    "inductor": (("l_low", "L", "H"), ("r_dc", "Rdc", "Ω"), ("srf", "SRF", "Hz"),
                 ("z_at_srf", "|Z| at SRF", "Ω"), ("c_par", "Cpar", "F")),
}  # fmt: skip


def _glance_part(summary: RunSummary, spec: PartSpec, rows: list[tuple[dict, SampleResult]]) -> str:
    """One part's table: every landmark an engineer looks for, one row per sample."""
    kind = verdicts.kind_of(spec)
    columns = _GLANCE_COLUMNS[kind]
    z_points = {s.label: verdicts.z_at_frequencies(s, spec) for _, s in rows}
    freqs = sorted({f for values in z_points.values() for f in values})
    dfs = {s.label: verdicts.dissipation_factor(s, spec) for _, s in rows}
    df_freqs = sorted({at for _, at in dfs.values() if at is not None})
    body = []
    for row, sample in rows:
        total, outside, used = points_text(sample)
        if row["bias_v"]:
            change = row["change_from_0v"]
            against = "—" if change is None else f"{percent(change)} vs 0 V"
        else:
            against = percent(row["deviation"])
        cells = [esc(row["sample"]), esc(f"{row['bias_v']:g} V")]
        cells += [si(row.get(key), unit) for key, _, unit in columns]
        if df_freqs:
            df, at = dfs[sample.label]
            cells.append(
                "—"
                if df is None
                else esc(
                    f"{df:.3g}" + (f" at {format_si(at, 'Hz', 3)}" if len(df_freqs) > 1 else "")
                )
            )
        cells += [si(z_points[sample.label].get(f), "Ω", 3) for f in freqs]
        cells += [
            si(row["drive_v"], "V", 3),
            esc(against),
            verdict_html(row["result"], row["bias_v"], short=True, reason=row["reason"]),
            "—" if row["rms_log_error"] is None else f"{row['rms_log_error']:.3g}",
            ("—" if used is None else f"{used} of {total}") + f" / {outside}",
        ]
        body.append(cells)
    headers = ["sample", "bias (V)", *(f"{name} ({unit})" for _, name, unit in columns)]
    if df_freqs:
        headers.append(f"DF at {format_si(df_freqs[0], 'Hz', 3)}" if len(df_freqs) == 1 else "DF")
    headers += [f"|Z| at {format_si(f, 'Hz', 4)} (Ω)" for f in freqs]
    headers += ["drive (V rms)", "deviation", "verdict", "RMS log error",
                "points fitted / outside window"]  # fmt: skip
    first_numeric = 2
    numeric = set(range(first_numeric, len(headers))) - {len(headers) - 3}
    model = ""
    typical = exports.typical_model(summary, spec.name)
    if typical is not None:
        model = f" · typical model {exports.typical_spice_name(spec.name)} = {typical.sample.label}"
    nominal = ""
    if spec.nominal:
        unit = "Ω" if spec.kind == "bead" else ("F" if kind == "capacitor" else "H")
        tol = f" ± {100 * spec.tolerance:g} %" if spec.tolerance is not None else ""
        label = landmark_label(spec, exports.main_landmark(spec, rows[0][1])[0])
        nominal = f" · {label} nominal {format_si(spec.nominal, unit, 4)}{tol}"
    return (
        f'<h3 class="glance">{esc(spec.name)}<span class="note">{esc(nominal + model)}</span></h3>'
        + '<div class="scroll">'
        + table(headers, body, numeric=numeric, css_class="glance")
        + "</div>"
    )


def _glance_section(summary: RunSummary) -> str:
    by_part: dict[str, list[tuple[dict, SampleResult]]] = {}
    for row, sample in zip(exports.summary_rows(summary), summary.samples, strict=True):
        by_part.setdefault(sample.part, []).append((row, sample))
    tables = [
        _glance_part(summary, spec, by_part[spec.name])
        for spec in summary.parts
        if spec.name in by_part
    ]
    return (
        "<h2>Results at a glance</h2>"
        + "".join(tables)
        + '<p class="note">Landmarks are read from the measured points inside the window '
        "where the data give them, else from the fitted model (the same values as the "
        "console). DF: ESR·ωC at 120 Hz or 1 kHz where measured inside the window. Drive: "
        "the largest RMS voltage across the part over the sweep, from the source power, "
        "Z0 and the port series resistors. Deviation: the main landmark against the "
        "nominal value at 0 V; at a DC-bias point, its change from the same sample at 0 V "
        "(a nominal value is stated without bias, so it is not judged there). Verdict: "
        "PASS or FAIL against the tolerance, CHECK when the fit missed its quality bound, "
        "a fixture step was skipped or a plausibility check failed (the reason follows). "
        "Points fitted: those inside the window and the fit's frequency range.</p>"
    )


def _notes_section(items: Iterable[str]) -> str:
    listed = warnings_list(items)
    return f"<h2>Notes from the run</h2>{listed}" if listed else ""


def _lot_html(summary: RunSummary, spec: PartSpec, figs: Figures) -> str:
    samples = [s for s in summary.samples if s.part == spec.name]
    out = ["<h3>Lot</h3>"]
    lowest = min(s.bias_v for s in samples)
    overlay = [s for s in samples if s.bias_v == lowest]
    if len(overlay) > 1:
        out.append(
            figs.embed(
                Plot("lot_figure", (spec.name, overlay)),
                f"{spec.name}_lot",
                f"{spec.name}: every sample at {lowest:g} V overlaid.",
            )
        )
    biases = sorted({s.bias_v for s in samples})
    if len(biases) > 1:
        for name in dict.fromkeys(s.sample for s in samples):
            curves = sorted((s for s in samples if s.sample == name), key=lambda s: s.bias_v)
            if len(curves) < 2:
                continue
            out.append(
                figs.embed(
                    Plot(
                        "lot_figure",
                        (spec.name, curves),
                        {"title": f"{spec.name} / {name}: |Z| and ESR at each DC bias"},
                    ),
                    f"{spec.name}_{name}_bias_overlay",
                    f"{spec.name} / {name}: |Z| and ESR at every DC bias point overlaid.",
                )
            )
    stats = exports.lot_statistics(summary).get(spec.name, {})
    for bias, landmarks in stats.items():
        rows = []
        for key, s in landmarks.items():
            unit = exports.LANDMARK_UNITS.get(key, "")
            spread = f"{100 * s.std / s.mean:.2g} %" if s.n >= 2 and s.mean else "—"
            rows.append(
                [
                    esc(key),
                    str(s.n),
                    si(s.mean, unit),
                    si(s.std, unit, 3),
                    esc(spread),
                    si(s.min, unit),
                    si(s.max, unit),
                ]
            )
        out.append(f"<h4>Lot statistics at {esc(f'{bias:g}')} V</h4>")
        out.append(
            table(
                ["landmark", "n", "mean", "std (n−1)", "std/mean", "min", "max"],
                rows,
                numeric={1, 2, 3, 4, 5, 6},
            )
        )
    points = exports.bias_table(summary).get(spec.name)
    if points:
        curves: dict[str, tuple[list[float], list[float]]] = {}
        for p in points:
            bias_list, cap_list = curves.setdefault(p.sample, ([], []))
            bias_list.append(p.bias_v)
            cap_list.append(p.c_low)
        starts = {min(bias) for bias, _ in curves.values()}
        reference = f"{starts.pop():g} V" if len(starts) == 1 else "the lowest bias"
        out.append("<h4>Capacitance versus DC bias</h4>")
        out.append(
            figs.embed(
                Plot("bias_figure", (spec.name, curves), {"nominal": spec.nominal}),
                f"{spec.name}_bias",
                f"{spec.name}: c_low versus DC bias, and its change from {reference}"
                + ("; dotted: the nominal value (stated at 0 V)." if spec.nominal else "."),
            )
        )
        out.append(
            table(
                ["sample", "bias", "c_low", f"change from {reference}"],
                [
                    [esc(p.sample), esc(f"{p.bias_v:g} V"), si(p.c_low, "F"), percent(p.change)]
                    for p in points
                ],
                numeric={1, 2, 3},
            )
        )
    return "".join(out)


def _part_section(summary: RunSummary, spec: PartSpec, figs: Figures) -> str:
    samples = [s for s in summary.samples if s.part == spec.name]
    facts: dict[str, Any] = {"kind": spec.kind, "description": spec.description or "—"}
    unit = "Ω" if spec.kind == "bead" else ("F" if spec.kind in exports.CAPACITOR_KINDS else "H")
    if spec.nominal:
        facts["nominal"] = format_si(spec.nominal, unit)
        if spec.kind == "bead" and spec.nominal_at_hz:
            facts["nominal"] += f" at {format_si(spec.nominal_at_hz, 'Hz')}"
    facts["tolerance"] = f"± {100 * spec.tolerance:g} %" if spec.tolerance is not None else "—"
    if spec.rated_voltage:
        facts["rated voltage"] = format_si(spec.rated_voltage, "V")
    facts["model requested"] = spec.model
    facts["samples measured"] = str(len(samples))
    typical = exports.typical_model(summary, spec.name) if samples else None
    if typical is not None:
        facts["typical model"] = (
            f"{exports.typical_spice_name(spec.name)} = {typical.sample.label} "
            f"({typical.basis}; family {typical.family}"
            + (", refitted" if typical.refitted else "")
            + ")"
        )
    body = [
        f'<h2 id="{esc(exports.safe_filename(spec.name))}">Part {esc(spec.name)}</h2>',
        kv_table(facts),
    ]
    if typical is not None and typical.warnings:
        body.append(warnings_list(typical.warnings))
    if not samples:
        body.append('<p class="note">No sample of this part was measured.</p>')
        return "".join(body)
    body.append(_lot_html(summary, spec, figs))
    body.append("<h3>Samples</h3>")
    body.extend(sample_section(summary, spec, sample, figs) for sample in samples)
    return "".join(body)


def _calibration_facts(summary: RunSummary) -> dict[str, Any]:
    """The calibration record, with its age when the run starts (if both times are known)."""
    facts = dict(summary.calibration)
    made = parse_time(facts.get("time") or facts.get("created"))
    started = parse_time(summary.setup.get("started") or summary.setup.get("created"))
    if made is not None and started is not None and "age_s" not in facts:
        # The calibration's time is kept to the second: one made in the run's first
        # second reads as before its start unless the start is taken to the second too.
        age = (started.replace(microsecond=0) - made).total_seconds()
        facts["age"] = (
            f"{duration(age)} at the start of the run" if age > 0 else "made during this run"
        )
    return facts


def _report_text(summary: RunSummary, run_dir: Path) -> tuple[str, Figures]:
    """The report's HTML with a placeholder per figure, and its figures queued."""
    figs = Figures(Path(run_dir))
    date = exports.run_date(summary)
    moment = parse_time(date)
    date = time_text(moment) if moment is not None else date
    title = f"zbench report: {summary.procedure_name}"
    toc = " · ".join(
        f'<a href="#{esc(exports.safe_filename(spec.name))}">{esc(spec.name)}</a>'
        for spec in summary.parts
    )
    body = [
        f"<h1>{esc(title)}</h1>",
        f'<p class="meta">Run {esc(summary.run_id)} · {esc(date)} · '
        f"zbench {esc(summary.software_version or '?')} · parts: {toc}</p>",
        _notes_section(summary.warnings),
        _glance_section(summary),
        "<h2>Set-up</h2>",
        kv_table(summary.setup),
        "<h2>Calibration</h2>",
        kv_table(_calibration_facts(summary)),
        "<h2>Ground-loop check</h2>",
        '<p class="note">Mount short at low frequency: current returning through the cable '
        "shields adds their resistance in series with the part.</p>",
        records_table(summary.ground_loop, "position") or kv_table(summary.ground_loop),
        _window_section(summary),
    ]
    body.extend(_part_section(summary, spec, figs) for spec in summary.parts)
    body.append(
        '<p class="note">Values in SI units. Uncertainties are one standard deviation from '
        "the fit's Jacobian and the per-point measurement uncertainty. Verdicts compare the "
        "main landmark with the procedure's nominal value and tolerance at 0 V; at DC-bias "
        "points the change from 0 V is given instead.</p>"
    )
    text = (
        '<!DOCTYPE html>\n<html lang="en"><head><meta charset="utf-8">'
        f"<title>{esc(title)}</title><style>{CSS}</style></head><body>\n"
        + "\n".join(part for part in body if part)
        + "\n</body></html>\n"
    )
    return text, figs


def report_html(summary: RunSummary, run_dir: Path) -> tuple[str, list[Path]]:
    """HTML text of the report and the PNG files saved under ``run_dir/plots``."""
    text, figs = _report_text(summary, Path(run_dir))
    return figs.render(text), figs.paths


@dataclass
class ReportDraft:
    """A report whose text is made and whose figures are being drawn by the workers
    (:func:`start_report`); :func:`write_report` finishes it."""

    summary: RunSummary
    text: str
    figs: Figures

    def cancel(self) -> None:
        """Stop drawing (the report will not be written from this draft)."""
        self.figs.cancel()


def start_report(run_dir: Path, summary: RunSummary) -> ReportDraft:
    """Make the report's text and hand its figures to the worker processes now, so they
    are drawn while the caller goes on (a run writes its exports meanwhile)."""
    text, figs = _report_text(summary, Path(run_dir))
    figs.start()
    return ReportDraft(summary, text, figs)


def write_report(run_dir: Path, summary: RunSummary, draft: ReportDraft | None = None) -> Path:
    """Write ``report.html`` (and its figures under ``plots/``) into ``run_dir``;
    ``draft``: the same summary's report started by :func:`start_report`."""
    run_dir = Path(run_dir)
    if draft is not None and draft.summary is summary:
        text = draft.figs.render(draft.text)
    else:
        if draft is not None:
            draft.cancel()
        text, _ = report_html(summary, run_dir)
    return atomic_write_text(run_dir / "report.html", text)
