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

import base64
import html
import math
from collections.abc import Iterable, Mapping
from datetime import datetime, timezone
from pathlib import Path
from typing import Any

import numpy as np

from bench import exports, plots, verdicts
from bench.files import atomic_write_text
from bench.results import PartSpec, RunSummary, SampleResult
from bench.units import format_si

CSS = """
:root { --ink: #1b1b1b; --muted: #5a5a5a; --rule: #c9c9c9; --band: #f3f4f6; }
* { box-sizing: border-box; }
body { font-family: "DejaVu Sans", "Helvetica Neue", Arial, sans-serif; color: var(--ink);
       max-width: 72rem; margin: 1.5rem auto; padding: 0 1.2rem; line-height: 1.4;
       font-size: 10.5pt; }
h1 { font-size: 1.55rem; margin: 0 0 .2rem; }
h2 { font-size: 1.2rem; border-bottom: 2px solid var(--ink); padding-bottom: .15rem;
     margin-top: 2.2rem; }
h3 { font-size: 1.05rem; margin: 1.6rem 0 .4rem; border-bottom: 1px solid var(--rule); }
h4 { font-size: .95rem; margin: 1rem 0 .3rem; }
p.meta { color: var(--muted); margin: 0 0 1rem; }
table { border-collapse: collapse; margin: .4rem 0 .9rem; font-size: .9rem; }
th, td { border: 1px solid var(--rule); padding: .18rem .5rem; text-align: left;
         vertical-align: top; }
th { background: var(--band); font-weight: 600; }
td.num { text-align: right; font-variant-numeric: tabular-nums; white-space: nowrap; }
table.kv th { width: 14rem; }
table.glance { font-size: .8rem; }
table.window td:first-child { white-space: nowrap; }
table.glance td { white-space: nowrap; padding: .15rem .3rem; }
table.glance th { font-size: .72rem; }
table.glance th { vertical-align: bottom; padding: .15rem .3rem; }
.verdict-pass { font-weight: 700; }
.verdict-fail { font-weight: 700; text-decoration: underline; }
.verdict-pass::before { content: "\\2713\\00a0"; }
.verdict-fail::before { content: "\\2717\\00a0"; }
.verdict-check { font-weight: 700; font-style: italic; }
.verdict-check::before { content: "?\\00a0"; }
span.reason { white-space: normal; display: inline-block; min-width: 9rem; max-width: 13rem;
              font-size: .75rem; }
div.scroll { overflow-x: auto; }
@media print { div.scroll { overflow: visible; } }
h3.glance span.note { font-weight: normal; font-size: .85rem; }
figure { margin: .6rem 0 1rem; page-break-inside: avoid; break-inside: avoid; }
figure img { max-width: 100%; border: 1px solid var(--rule); }
figcaption { color: var(--muted); font-size: .85rem; }
pre { background: var(--band); border: 1px solid var(--rule); padding: .5rem .7rem;
      font-size: .78rem; overflow-x: auto; white-space: pre; }
div.pair { display: flex; gap: 2rem; flex-wrap: wrap; }
ul.warnings { margin: .3rem 0 .8rem; padding-left: 1.2rem; }
ul.warnings li { margin: .1rem 0; }
.note { color: var(--muted); font-size: .88rem; }
section.sample { page-break-inside: auto; }
@media print {
  body { max-width: none; margin: 0; font-size: 9.5pt; }
  h2 { page-break-before: auto; page-break-after: avoid; }
  h3, h4 { page-break-after: avoid; }
  pre { white-space: pre-wrap; }
  a { color: inherit; text-decoration: none; }
  table.glance { font-size: 7.5pt; }
}
"""

_UNIT_SUFFIXES = {
    "_hz": "Hz",
    "_ohm": "Ω",
    "_ohms": "Ω",
    "_v": "V",
    "_a": "A",
    "_f": "F",
    "_h": "H",
    "_db": "dB",
    "_dbm": "dBm",
    "_s": "s",
}

# Units of set-up keys that carry none in their name (procedure and manifest spellings).
_KEY_UNITS = {
    "start": "Hz",
    "stop": "Hz",
    "if_bandwidth": "Hz",
    "ifbw": "Hz",
    "crossover": "Hz",
    "power": "dBm",
    "series_r": "Ω",
    "z0": "Ω",
    "bias_tee_rating": "V",
    "dc_block_rating": "V",
    "rated_voltage": "V",
    "settle": "s",
    "sweep_time": "s",
    # calibration kit definitions
    "short_inductance": "H",
    "open_capacitance": "F",
    "load_resistance": "Ω",
    "load_inductance": "H",
    "short_delay": "s",
    "open_delay": "s",
    "load_delay": "s",
    "through_delay": "s",
}
_FRACTION_KEYS = ("tolerance",)
_TIME_KEYS = ("started", "created", "time", "date", "finished")


def esc(value: Any) -> str:
    """HTML-escaped text of ``value`` (quotes included)."""
    return html.escape(str(value), quote=True)


def _duration(seconds: float) -> str:
    seconds = float(seconds)
    if seconds < 120:
        return f"{seconds:.0f} s"
    minutes = seconds / 60
    if minutes < 120:
        return f"{minutes:.0f} min"
    hours = minutes / 60
    if hours < 48:
        return f"{hours:.1f} h"
    return f"{hours / 24:.1f} days"


def _value_text(key: str, value: Any) -> str:
    """Readable text of a set-up value; a key suffix such as ``_hz`` or ``_ohm`` sets the unit."""
    if value is None:
        return "—"
    if isinstance(value, bool):
        return "yes" if value else "no"
    lower = key.lower().replace(" ", "_")
    if isinstance(value, (int, float)):
        if "age" in lower and lower.endswith("_s"):
            return _duration(value)
        if lower in _FRACTION_KEYS:
            return f"{100 * value:g} %"
        unit = _KEY_UNITS.get(lower)
        for suffix, suffix_unit in _UNIT_SUFFIXES.items():
            if unit is None and lower.endswith(suffix):
                unit = suffix_unit
        if unit in ("dB", "dBm"):
            return f"{value:g} {unit}"
        if unit is not None:
            return format_si(float(value), unit)
        return f"{value:.6g}" if isinstance(value, float) else str(value)
    if isinstance(value, (list, tuple)):
        return ", ".join(_value_text(key, item) for item in value)
    if lower in _TIME_KEYS:
        moment = _when(value)
        if moment is not None:
            return _time_text(moment)
    return str(value)


def _time_text(moment: datetime) -> str:
    """``2026-12-02 02:58:01 UTC``: an ISO time as a reader writes it."""
    return moment.astimezone(timezone.utc).strftime("%Y-%m-%d %H:%M:%S UTC")


def _label(key: str) -> str:
    text = str(key)
    for suffix in _UNIT_SUFFIXES:
        if text.lower().endswith(suffix) and len(text) > len(suffix):
            text = text[: -len(suffix)]
            break
    return text.replace("_", " ")


def _kv_table(mapping: Mapping[str, Any]) -> str:
    """A key/value table; nested mappings become nested tables."""
    if not mapping:
        return '<p class="note">Not recorded.</p>'
    rows = []
    for key, value in mapping.items():
        is_table = isinstance(value, Mapping)
        cell = _kv_table(value) if is_table else esc(_value_text(str(key), value))
        rows.append(f"<tr><th>{esc(_label(key))}</th><td>{cell}</td></tr>")
    return '<table class="kv">' + "".join(rows) + "</table>"


def _records_table(mapping: Mapping[str, Any], first: str) -> str | None:
    """A mapping of like mappings (one per position, say) as one table; None otherwise."""
    if not mapping or not all(isinstance(v, Mapping) for v in mapping.values()):
        return None
    columns: list[str] = []
    for record in mapping.values():
        columns.extend(key for key in record if key not in columns)
    rows = []
    for name, record in mapping.items():
        cells = [esc(name)]
        for column in columns:
            value = record.get(column)
            cells.append("—" if value is None else esc(_value_text(column, value)))
        rows.append(cells)
    return _table([first, *(_label(c) for c in columns)], rows)


def _table(
    headers: Iterable[str],
    rows: Iterable[Iterable[str]],
    numeric: set[int] | None = None,
    *,
    css_class: str = "",
) -> str:
    numeric = numeric or set()
    head = "".join(f"<th>{esc(h)}</th>" for h in headers)
    body = []
    for row in rows:
        cells = []
        for index, cell in enumerate(row):
            cls = ' class="num"' if index in numeric else ""
            cells.append(f"<td{cls}>{cell}</td>")
        body.append("<tr>" + "".join(cells) + "</tr>")
    opening = f'<table class="{esc(css_class)}">' if css_class else "<table>"
    return f"{opening}<thead><tr>{head}</tr></thead><tbody>{''.join(body)}</tbody></table>"


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


def _si(value: float | None, unit: str, digits: int = 4) -> str:
    if value is None or not math.isfinite(value):
        return "—"
    return esc(format_si(value, unit, digits))


def _verdict_html(
    result: str, bias_v: float = 0.0, *, short: bool = False, reason: str = ""
) -> str:
    """PASS, FAIL or CHECK (with its reason), or why there is none."""
    if not result:
        if bias_v:
            text = "not judged" if short else "not judged under bias"
        else:
            text = "no tolerance" if short else "no tolerance given"
        return f'<span class="note">{text}</span>'
    mark = f'<span class="verdict-{esc(result.lower())}">{esc(result.upper())}</span>'
    if result.upper() == "CHECK" and reason:
        mark += f'<br><span class="note reason">{esc(reason)}</span>'
    return mark


def _percent(value: float | None) -> str:
    if value is None or not math.isfinite(value):
        return "—"
    return f"{100 * value:+.2f} %"


class _Figures:
    """Saves each figure under ``plots/`` and returns its embedded ``<figure>``."""

    def __init__(self, run_dir: Path):
        self.folder = run_dir / "plots"
        self.paths: list[Path] = []

    def embed(self, fig: Any, name: str, caption: str) -> str:
        path = self.folder / f"{exports.safe_filename(name)}.png"
        data = plots.save_png(fig, path)
        self.paths.append(path)
        encoded = base64.b64encode(data).decode("ascii")
        return (
            f'<figure><img alt="{esc(caption)}" src="data:image/png;base64,{encoded}">'
            f"<figcaption>{esc(caption)}</figcaption></figure>"
        )


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
                _si(_scalar(z_min), "Ω", 3),
                _si(_scalar(z_max), "Ω", 3),
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
        + _table(
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


def _landmark_label(spec: PartSpec, name: str) -> str:
    """A landmark's name for a reader: ``|Z| at 100 MHz`` for a bead's stated point."""
    if name == "z_at_nominal_hz" and spec.nominal_at_hz:
        return f"|Z| at {format_si(spec.nominal_at_hz, 'Hz', 4)}"
    return name


def _points_text(sample: SampleResult) -> tuple[int, int, int | None]:
    """(points in the sweep, points outside the window, points the fit used or None)."""
    total = int(np.size(sample.data.f))
    outside = int(np.count_nonzero(~np.asarray(sample.data.inside_window, dtype=bool)))
    used = sample.fit.quality.points_used if sample.fit is not None else None
    return total, outside, used


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
        total, outside, used = _points_text(sample)
        if row["bias_v"]:
            change = row["change_from_0v"]
            against = "—" if change is None else f"{_percent(change)} vs 0 V"
        else:
            against = _percent(row["deviation"])
        cells = [esc(row["sample"]), esc(f"{row['bias_v']:g} V")]
        cells += [_si(row.get(key), unit) for key, _, unit in columns]
        if df_freqs:
            df, at = dfs[sample.label]
            cells.append(
                "—"
                if df is None
                else esc(
                    f"{df:.3g}" + (f" at {format_si(at, 'Hz', 3)}" if len(df_freqs) > 1 else "")
                )
            )
        cells += [_si(z_points[sample.label].get(f), "Ω", 3) for f in freqs]
        cells += [
            _si(row["drive_v"], "V", 3),
            esc(against),
            _verdict_html(row["result"], row["bias_v"], short=True, reason=row["reason"]),
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
        label = _landmark_label(spec, exports.main_landmark(spec, rows[0][1])[0])
        nominal = f" · {label} nominal {format_si(spec.nominal, unit, 4)}{tol}"
    return (
        f'<h3 class="glance">{esc(spec.name)}<span class="note">{esc(nominal + model)}</span></h3>'
        + '<div class="scroll">'
        + _table(headers, body, numeric=numeric, css_class="glance")
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


def _measured_landmarks(sample: SampleResult) -> dict[str, float | None]:
    """Landmarks read straight from the points inside the window (empty if they cannot be)."""
    from bench.core.landmarks import landmarks_for

    try:
        return dict(
            landmarks_for(sample.fit.kind, sample.data.f, sample.data.z, sample.data.inside_window)
        )
    except ValueError:
        return {}


def _landmark_table(sample: SampleResult) -> str:
    fit = sample.fit
    sigma = dict(getattr(fit, "uncertainties", {}) or {})
    sigma_marks = {**sigma, **dict(getattr(fit, "landmark_uncertainties", {}) or {})}
    measured = _measured_landmarks(sample)
    # A ±1σ column only when the fit states landmark uncertainties.
    with_sigma = any(sigma_marks.get(key) is not None for key in fit.landmarks)
    rows = []
    for key, value in fit.landmarks.items():
        unit = exports.LANDMARK_UNITS.get(key, "")
        direct = measured.get(key)
        difference = (
            _percent(value / direct - 1.0)
            if value is not None and direct and math.isfinite(direct)
            else "—"
        )
        row = [esc(key), _si(value, unit)]
        if with_sigma:
            row.append(_si(sigma_marks.get(key), unit, 3))
        rows.append([*row, _si(direct, unit), difference])
    headers = ["landmark", "model", *(["±1σ"] if with_sigma else []), "read from the data"]
    landmarks = _table([*headers, "model vs data"], rows, numeric=set(range(1, len(headers) + 1)))
    rows = []
    for key, value in fit.elements.items():
        unit = _element_unit(key)
        error = sigma.get(key)
        relative = (
            f"{100 * error / value:.2g} %"
            if error is not None and value and math.isfinite(error)
            else "—"
        )
        rows.append([esc(key), _si(value, unit), _si(error, unit, 3), esc(relative)])
    elements = _table(["element", "value", "±1σ", "±1σ (relative)"], rows, numeric={1, 2, 3})
    return (
        '<div class="pair">'
        f"<div><h4>Landmarks</h4>{landmarks}</div>"
        f"<div><h4>Model elements</h4>{elements}</div></div>"
    )


def _element_unit(name: str) -> str:
    head = name.lstrip("_")[:1].upper()
    return {"R": "Ω", "L": "H", "C": "F"}.get(head, "")


def _quality_text(sample: SampleResult) -> str:
    q = sample.fit.quality
    total, outside, used = _points_text(sample)
    text = (
        f"RMS complex-log error {q.rms_log_error:.3g}, largest {q.max_abs_log_error:.3g}; "
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


def _warnings_list(items: Iterable[str]) -> str:
    items = list(dict.fromkeys(items))
    if not items:
        return ""
    return '<ul class="warnings">' + "".join(f"<li>{esc(w)}</li>" for w in items) + "</ul>"


def _fit_range_is_narrower(sample: SampleResult) -> bool:
    """Whether the fit left out an end of the sweep (``fit.f_range``, Hz): it is hatched."""
    f_range = getattr(sample.fit, "f_range", None)
    f = np.asarray(sample.data.f, dtype=float)
    if f_range is None or f.size < 2:
        return False
    lo, hi = (float(v) for v in f_range)
    return lo > f[0] * (1 + 1e-9) or hi < f[-1] * (1 - 1e-9)


def _notes_section(items: Iterable[str]) -> str:
    listed = _warnings_list(items)
    return f"<h2>Notes from the run</h2>{listed}" if listed else ""


def _sample_section(
    summary: RunSummary, spec: PartSpec, sample: SampleResult, figs: _Figures
) -> str:
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
    label = esc(_landmark_label(spec, name))
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
    parts.append(_kv_table(facts))
    if sample.bias_v and value is not None:
        reference = exports.zero_bias_values(summary).get((sample.part, sample.sample))
        change = None if not reference else value / reference - 1.0
        if change is not None:
            parts.append(
                f"<p>{label} = {_si(value, unit)} at {esc(f'{sample.bias_v:g}')} V: "
                f"{_percent(change)} from the same sample at 0 V ({_si(reference, unit)}). "
                '<span class="note">Not judged under bias: the nominal value is stated '
                "at 0 V.</span></p>"
            )
        else:
            parts.append(
                f"<p>{label} = {_si(value, unit)} at {esc(f'{sample.bias_v:g}')} V "
                '<span class="note">(no 0 V measurement to compare with; not judged under '
                "bias)</span></p>"
            )
    elif spec.nominal:
        tol = f" ± {100 * spec.tolerance:g} %" if spec.tolerance is not None else ""
        parts.append(
            f"<p>{label} = {_si(value, unit)} against {_si(spec.nominal, unit)}{esc(tol)}: "
            f"deviation {_percent(deviation)}, "
            f"{_verdict_html(judged.result, sample.bias_v, reason=judged.reason)}</p>"
        )
    if judged.result == "CHECK" and (sample.bias_v or not spec.nominal):
        parts.append(f"<p>{_verdict_html(judged.result, reason=judged.reason)}</p>")
    caption = (
        f"{heading}: |Z| and ESR versus frequency; shaded band: measurable window; "
        "crosses: points outside it; dashed: fitted model"
    )
    if sample.fit is not None:
        caption += (
            "; lower panels: model minus measurement (complex log, magnitude in % and "
            "phase in degrees) with the ±1σ measurement band"
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
            plots.sample_figure(sample.data, sample.fit, title=heading, setups=sample.setups),
            f"{sample.label}_impedance",
            caption + ".",
        )
    )
    if sample.fit is None:
        parts.append(
            f"<p><strong>No model:</strong> {esc(sample.fit_error or 'the fit failed')}</p>"
        )
        parts.append(_warnings_list(sample.warnings))
        parts.append("</section>")
        return "".join(parts)
    parts.append(f"<p>Fit quality: {esc(_quality_text(sample))}.</p>")
    parts.append(_landmark_table(sample))
    parts.append(_warnings_list([*sample.warnings, *sample.fit.warnings]))
    spice = subckt_text(
        sample.fit,
        exports.sample_spice_name(sample),
        provenance=exports.provenance(summary, sample),
    )
    parts.append(f"<h4>SPICE subcircuit</h4><pre>{esc(spice)}</pre></section>")
    return "".join(parts)


def _lot_html(summary: RunSummary, spec: PartSpec, figs: _Figures) -> str:
    samples = [s for s in summary.samples if s.part == spec.name]
    out = ["<h3>Lot</h3>"]
    lowest = min(s.bias_v for s in samples)
    overlay = [s for s in samples if s.bias_v == lowest]
    if len(overlay) > 1:
        out.append(
            figs.embed(
                plots.lot_figure(spec.name, overlay),
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
                    plots.lot_figure(
                        spec.name,
                        curves,
                        title=f"{spec.name} / {name}: |Z| and ESR at each DC bias",
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
                    _si(s.mean, unit),
                    _si(s.std, unit, 3),
                    esc(spread),
                    _si(s.min, unit),
                    _si(s.max, unit),
                ]
            )
        out.append(f"<h4>Lot statistics at {esc(f'{bias:g}')} V</h4>")
        out.append(
            _table(
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
                plots.bias_figure(spec.name, curves, nominal=spec.nominal),
                f"{spec.name}_bias",
                f"{spec.name}: c_low versus DC bias, and its change from {reference}"
                + ("; dotted: the nominal value (stated at 0 V)." if spec.nominal else "."),
            )
        )
        out.append(
            _table(
                ["sample", "bias", "c_low", f"change from {reference}"],
                [
                    [esc(p.sample), esc(f"{p.bias_v:g} V"), _si(p.c_low, "F"), _percent(p.change)]
                    for p in points
                ],
                numeric={1, 2, 3},
            )
        )
    return "".join(out)


def _part_section(summary: RunSummary, spec: PartSpec, figs: _Figures) -> str:
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
        _kv_table(facts),
    ]
    if typical is not None and typical.warnings:
        body.append(_warnings_list(typical.warnings))
    if not samples:
        body.append('<p class="note">No sample of this part was measured.</p>')
        return "".join(body)
    body.append(_lot_html(summary, spec, figs))
    body.append("<h3>Samples</h3>")
    body.extend(_sample_section(summary, spec, sample, figs) for sample in samples)
    return "".join(body)


def _when(value: Any) -> datetime | None:
    if not isinstance(value, str):
        return None
    try:
        moment = datetime.fromisoformat(value.strip().replace("Z", "+00:00"))
    except ValueError:
        return None
    return moment if moment.tzinfo else moment.replace(tzinfo=timezone.utc)


def _calibration_facts(summary: RunSummary) -> dict[str, Any]:
    """The calibration record, with its age when the run starts (if both times are known)."""
    facts = dict(summary.calibration)
    made = _when(facts.get("time") or facts.get("created"))
    started = _when(summary.setup.get("started") or summary.setup.get("created"))
    if made is not None and started is not None and "age_s" not in facts:
        age = (started - made).total_seconds()
        facts["age"] = (
            f"{_duration(age)} at the start of the run" if age > 0 else "made during this run"
        )
    return facts


def report_html(summary: RunSummary, run_dir: Path) -> tuple[str, list[Path]]:
    """HTML text of the report and the PNG files saved under ``run_dir/plots``."""
    figs = _Figures(Path(run_dir))
    date = exports.run_date(summary)
    moment = _when(date)
    date = _time_text(moment) if moment is not None else date
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
        _kv_table(summary.setup),
        "<h2>Calibration</h2>",
        _kv_table(_calibration_facts(summary)),
        "<h2>Ground-loop check</h2>",
        '<p class="note">Mount short at low frequency: current returning through the cable '
        "shields adds their resistance in series with the part.</p>",
        _records_table(summary.ground_loop, "position") or _kv_table(summary.ground_loop),
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
    return text, figs.paths


def write_report(run_dir: Path, summary: RunSummary) -> Path:
    """Write ``report.html`` (and its figures under ``plots/``) into ``run_dir``."""
    run_dir = Path(run_dir)
    text, _ = report_html(summary, run_dir)
    return atomic_write_text(run_dir / "report.html", text)
