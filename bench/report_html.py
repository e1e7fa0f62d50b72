"""HTML building blocks of the run report: its style sheet, escaping, readable values.

Pure text functions (no figures, no files): :mod:`bench.report` and
:mod:`bench.report_sample` build the page from them. Every piece of text that comes from a
procedure, a file or an instrument goes through :func:`esc`.
"""

from __future__ import annotations

import html
import math
from collections.abc import Iterable, Mapping
from datetime import datetime, timezone
from typing import Any

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


def duration(seconds: float) -> str:
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


def value_text(key: str, value: Any) -> str:
    """Readable text of a set-up value; a key suffix such as ``_hz`` or ``_ohm`` sets the unit."""
    if value is None:
        return "—"
    if isinstance(value, bool):
        return "yes" if value else "no"
    lower = key.lower().replace(" ", "_")
    if isinstance(value, (int, float)):
        if "age" in lower and lower.endswith("_s"):
            return duration(value)
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
        return ", ".join(value_text(key, item) for item in value)
    if lower in _TIME_KEYS:
        moment = parse_time(value)
        if moment is not None:
            return time_text(moment)
    return str(value)


def time_text(moment: datetime) -> str:
    """``2026-12-02 02:58:01 UTC``: an ISO time as a reader writes it."""
    return moment.astimezone(timezone.utc).strftime("%Y-%m-%d %H:%M:%S UTC")


def parse_time(value: Any) -> datetime | None:
    if not isinstance(value, str):
        return None
    try:
        moment = datetime.fromisoformat(value.strip().replace("Z", "+00:00"))
    except ValueError:
        return None
    return moment if moment.tzinfo else moment.replace(tzinfo=timezone.utc)


def key_label(key: str) -> str:
    text = str(key)
    for suffix in _UNIT_SUFFIXES:
        if text.lower().endswith(suffix) and len(text) > len(suffix):
            text = text[: -len(suffix)]
            break
    return text.replace("_", " ")


def kv_table(mapping: Mapping[str, Any]) -> str:
    """A key/value table; nested mappings become nested tables."""
    if not mapping:
        return '<p class="note">Not recorded.</p>'
    rows = []
    for key, value in mapping.items():
        is_table = isinstance(value, Mapping)
        cell = kv_table(value) if is_table else esc(value_text(str(key), value))
        rows.append(f"<tr><th>{esc(key_label(key))}</th><td>{cell}</td></tr>")
    return '<table class="kv">' + "".join(rows) + "</table>"


def records_table(mapping: Mapping[str, Any], first: str) -> str | None:
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
            cells.append("—" if value is None else esc(value_text(column, value)))
        rows.append(cells)
    return table([first, *(key_label(c) for c in columns)], rows)


def table(
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


def si(value: float | None, unit: str, digits: int = 4) -> str:
    if value is None or not math.isfinite(value):
        return "—"
    return esc(format_si(value, unit, digits))


def verdict_html(result: str, bias_v: float = 0.0, *, short: bool = False, reason: str = "") -> str:
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


def percent(value: float | None) -> str:
    if value is None or not math.isfinite(value):
        return "—"
    return f"{100 * value:+.2f} %"


def warnings_list(items: Iterable[str]) -> str:
    items = list(dict.fromkeys(items))
    if not items:
        return ""
    return '<ul class="warnings">' + "".join(f"<li>{esc(w)}</li>" for w in items) + "</ul>"
