"""``zbench window``: the measurable impedance window of a set-up (docs/design.md §3).

``--method`` chooses shunt-through (default), series-through or reflection; ``--method
all`` prints the three side by side. A reflection takes ``--reflection-uncertainty``
(the one-port calibration's residual on |Γ|) and no series resistors.

Values take SI prefixes as engineers write them (``--series-r 499``, ``--z0 50``,
``--noise-floor "-110 dB"``, ``--tolerance 10%``). ``--json`` prints one JSON object
with SI values (see :meth:`bench.core.window.Window.to_dict`).
"""

from __future__ import annotations

import json

import click

from bench.core.window import (
    DEFAULT_REFLECTION_UNCERTAINTY,
    DEFAULT_THROUGH_DRIFT_DB,
    DEFAULT_TRACE_NOISE_DB,
    METHODS,
    Window,
    check_method,
    measurable_window,
)
from bench.errors import InputError
from bench.units import QuantityError, format_si, parse_quantity


def _value(text: str, unit: str, option: str) -> float:
    try:
        return parse_quantity(text, unit, name=option)
    except QuantityError as exc:
        raise InputError(
            str(exc), hint=f"give {option} as a number, e.g. {_EXAMPLES[option]}"
        ) from exc


def _fraction(text: str) -> float:
    stripped = text.strip()
    if stripped.endswith("%"):
        return _value(stripped[:-1], "", "--tolerance") / 100.0
    return _value(stripped, "", "--tolerance")


_EXAMPLES = {
    "--z0": "50",
    "--series-r": "499 or 1k",
    "--noise-floor": "-100 (dB relative to the through)",
    "--trace-noise": "0.01 (dB RMS)",
    "--through-drift": "0.1 (dB RMS)",
    "--tolerance": "0.1 or 10%",
    "--reflection-uncertainty": "0.005",
}


def describe_window(window: Window) -> str:
    """The window as a short table for a person, with SI prefixes."""
    w = window
    eps = w.multiplicative_error * 100
    rows = [("reference impedance z0", format_si(w.z0, "Ω"))]
    if w.method == "reflection":
        rows += [
            ("noise floor", f"{w.noise_floor_db:g} dB re full reflection"),
            ("calibration residual", f"|dΓ| = {w.reflection_uncertainty:g}"),
            ("trace noise", f"{w.trace_noise_db:g} dB RMS (ε = {eps:.3g} %)"),
        ]
    else:
        rows += [
            (
                "series resistor per port",
                f"{format_si(w.series_r, 'Ω')} (Ze = {format_si(w.ze, 'Ω')})",
            ),
            ("noise floor", f"{w.noise_floor_db:g} dB re through"),
            (
                "trace noise, through drift",
                f"{w.trace_noise_db:g} dB, {w.through_drift_db:g} dB RMS (ε = {eps:.3g} %)",
            ),
        ]
    rows += [
        ("tolerance", f"{w.tolerance * 100:g} %"),
        ("lowest impedance", f"{format_si(w.z_min, 'Ω')} (error reaches the tolerance)"),
        ("highest impedance", f"{format_si(w.z_max, 'Ω')} (error reaches the tolerance)"),
        ("span", f"{w.span_decades:.2f} decades"),
        (
            "smallest error",
            f"±{w.best_uncertainty * 100:.3g} % at {format_si(w.z_best, 'Ω')}",
        ),
    ]
    width = max(len(name) for name, _ in rows)
    lines = [f"Measurable window ({w.method}, resistive part)"]
    lines += [f"  {name:<{width}}  {value}" for name, value in rows]
    return "\n".join(lines)


@click.command("window")
@click.option(
    "--method",
    default="shunt-through",
    show_default=True,
    metavar="NAME",
    help=f"{', '.join(METHODS)}, or all.",
)
@click.option("--z0", "z0", default="50", show_default=True, help="Port reference impedance (Ω).")
@click.option(
    "--series-r", default="0", show_default=True, help="Series resistor at each port (Ω)."
)
@click.option(
    "--noise-floor",
    default="-100",
    show_default=True,
    help="Noise floor in dB relative to the through.",
)
@click.option(
    "--trace-noise",
    default=str(DEFAULT_TRACE_NOISE_DB),
    show_default=True,
    help="RMS trace noise (dB).",
)
@click.option(
    "--through-drift",
    default=str(DEFAULT_THROUGH_DRIFT_DB),
    show_default=True,
    help="RMS drift of the through reference between calibration and measurement (dB).",
)
@click.option(
    "--tolerance",
    default="0.1",
    show_default=True,
    help="Largest relative uncertainty accepted, a fraction or a percentage (0.1 or 10%).",
)
@click.option(
    "--reflection-uncertainty",
    default=str(DEFAULT_REFLECTION_UNCERTAINTY),
    show_default=True,
    help="Reflection only: the one-port calibration's residual on |Γ|.",
)
@click.option("--json", "as_json", is_flag=True, help="Print one JSON object, SI units.")
def command(
    method: str,
    z0: str,
    series_r: str,
    noise_floor: str,
    trace_noise: str,
    through_drift: str,
    tolerance: str,
    reflection_uncertainty: str,
    as_json: bool,
) -> None:
    """Print the measurable impedance window for a set-up."""
    name = method.strip().lower()
    methods = METHODS if name == "all" else (check_method(name),)
    r = _value(series_r, "ohm", "--series-r")
    windows = []
    for each in methods:
        windows.append(
            measurable_window(
                method=each,
                z0=_value(z0, "ohm", "--z0"),
                # Resistors at the ports belong to the two-port methods only.
                series_r=0.0 if each == "reflection" and name == "all" else r,
                noise_floor_db=_value(noise_floor, "dB", "--noise-floor"),
                trace_noise_db=_value(trace_noise, "dB", "--trace-noise"),
                through_drift_db=_value(through_drift, "dB", "--through-drift"),
                tolerance=_fraction(tolerance),
                reflection_uncertainty=_value(
                    reflection_uncertainty, "", "--reflection-uncertainty"
                ),
            )
        )
    if as_json:
        payload = windows[0].to_dict() if len(windows) == 1 else [w.to_dict() for w in windows]
        click.echo(json.dumps(payload))
    else:
        click.echo("\n\n".join(describe_window(w) for w in windows))
