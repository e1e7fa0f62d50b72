"""Check a command map against a live instrument, entry by entry.

:func:`probe` talks to the instrument with the map's queries; where a check has to set
something (a limit, a spacing, the data format, a short sweep) it reads the setting
first and puts it back afterwards. Each entry gives a :class:`Check`: ``ok``, ``fail``
(with the instrument's own error text when it gave one) or ``info``. The source power is
only ever lowered: its maximum is never tried.

An unknown query gets no answer from most instruments, so a check that times out asks
the error queue why; when the map's error query itself is wrong, the standard
``SYSTem:ERRor?`` is tried so the instrument's text still reaches the user.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from drivers.analyzer import NetworkAnalyzer, SweepPlan
from drivers.command_map import CommandMap, format_number
from drivers.errors import DriverError, InstrumentError, InstrumentTimeout, TransportError
from drivers.gain_phase import GainPhaseAnalyzer
from drivers.scpi import parse_error_entry

FALLBACK_ERROR_QUERIES = ("SYSTem:ERRor?", "SYSTem:ERRor:NEXT?")
NUMERIC = ("start_hz", "stop_hz", "points", "ifbw_hz", "power_dbm")
LIMIT_OF = {
    "start_hz": "frequency_hz",
    "stop_hz": "frequency_hz",
    "points": "points",
    "ifbw_hz": "ifbw_hz",
    "power_dbm": "power_dbm",
}


@dataclass(frozen=True)
class Check:
    """One entry of the map, checked: ``key`` (map key), ``status`` ok/fail/info, ``detail``."""

    key: str
    status: str
    detail: str


@dataclass
class ProbeReport:
    """What :func:`probe` found: the checks in order, the identity and present settings."""

    map_name: str
    resource: str
    checks: list[Check] = field(default_factory=list)
    identity: str | None = None
    present: dict[str, Any] = field(default_factory=dict)
    accepted_limits: dict[str, tuple[float, float]] = field(default_factory=dict)

    @property
    def failed(self) -> list[Check]:
        return [c for c in self.checks if c.status == "fail"]

    def add(self, key: str, status: str, detail: str) -> None:
        self.checks.append(Check(key, status, detail))


class _Prober:
    def __init__(self, transport: Any, cmap: CommandMap, report: ProbeReport):
        self.link = transport
        self.map = cmap
        self.report = report
        driver = GainPhaseAnalyzer if cmap.kind == "gain_phase" else NetworkAnalyzer
        self.vna = driver(transport, cmap)
        self.error_query: str | None = cmap.error_query

    # -- talking -------------------------------------------------------------------------

    def why(self) -> str:
        """The instrument's own words for what just went wrong (its error queue)."""
        queries = [self.error_query] if self.error_query else []
        queries += [q for q in FALLBACK_ERROR_QUERIES if q != self.error_query]
        for query in queries:
            try:
                answer = self.link.query(query)
                code, text = parse_error_entry(answer)
            except (InstrumentTimeout, DriverError):
                continue
            self.error_query = query
            if code == self.map.no_error_code:
                return "no error queued"
            entries = [f'{code},"{text}"']
            for _ in range(8):  # read on, so the next check starts with an empty queue
                try:
                    more, more_text = parse_error_entry(self.link.query(query))
                except DriverError:
                    break
                if more == self.map.no_error_code:
                    break
                entries.append(f'{more},"{more_text}"')
            words = self.map.explain_error(code)
            return "instrument: " + "; ".join(entries) + (f" ({words})" if words else "")
        self.error_query = None
        return "the instrument gave no error text (no error query answered)"

    def query(self, key: str, command: str) -> str | None:
        try:
            answer = self.link.query(command)
        except InstrumentTimeout:
            self.report.add(key, "fail", f"{command!r}: no answer; {self.why()}")
            return None
        return answer

    def query_number(self, key: str, command: str) -> float | None:
        answer = self.query(key, command)
        if answer is None:
            return None
        try:
            return float(answer)
        except ValueError:
            self.report.add(key, "fail", f"{command!r} answered {answer[:60]!r}, not a number")
            return None

    def write(self, key: str, command: str, template_key: str | None = None) -> bool:
        """Send a setting and read the error queue; False (and a failure) on an error.

        A command error (SCPI-99 codes -100…-199: the instrument did not understand the
        command) is put on ``template_key`` when given: the map's command is wrong, not
        the value.
        """
        try:
            self.link.write(command)
            self.vna.check_errors(command)
        except InstrumentError as exc:
            if template_key is not None and -199 <= exc.code <= -100:
                key = template_key
            words = self.map.explain_error(exc.code)
            self.report.add(
                key,
                "fail",
                f'{command!r} refused: {exc.code},"{exc.text}"' + (f" ({words})" if words else ""),
            )
            return False
        except (InstrumentTimeout, DriverError):
            self.report.add(key, "fail", f"{command!r}: {self.why()}")
            return False
        return True

    # -- checks --------------------------------------------------------------------------

    def errors_and_identity(self) -> None:
        m = self.map
        leftovers = 0
        try:
            leftovers = len(self.vna.drain_errors())
            self.report.add(
                "common.error_query",
                "ok",
                f"{m.error_query!r} answers"
                + (f" ({leftovers} old entries read and cleared)" if leftovers else ""),
            )
        except (InstrumentTimeout, DriverError) as exc:
            self.error_query = None
            self.report.add("common.error_query", "fail", f"{m.error_query!r}: {_short(exc)}")
            self.why()  # find an error query that works, for the texts below
        answer = self.query("common.identity", m.identity)
        if answer is not None:
            self.report.identity = answer.strip()
            self.report.add("common.identity", "ok", answer.strip())
        done = self.query("common.operation_complete", m.operation_complete)
        if done is not None:
            status = "ok" if done.strip() in ("1", "+1") else "fail"
            self.report.add("common.operation_complete", status, f"answered {done.strip()!r}")

    def settings(self) -> None:
        s = self.map.settings
        for name in NUMERIC:
            value = self.query_number(f"sweep.{name}.query", s[name].query)
            if value is not None:
                self.report.present[name] = value
                self.report.add(f"sweep.{name}.query", "ok", f"{s[name].query!r} = {value:g}")
        answer = self.query("sweep.spacing.query", s["spacing"].query)
        if answer is not None:
            choice = s["spacing"].parse_choice(answer)
            if choice is None:
                self.report.add(
                    "sweep.spacing.values",
                    "fail",
                    f"{s['spacing'].query!r} answered {answer!r}, none of {s['spacing'].choices}",
                )
            else:
                self.report.present["spacing"] = choice
                self.report.add("sweep.spacing.query", "ok", f"{answer.strip()!r} = {choice}")
        answer = self.query("correction.query", self.map.correction.query)
        if answer is not None:
            state = self.map.correction.parse_choice(answer)
            status = "ok" if state is not None else "fail"
            self.report.add("correction.query", status, f"answered {answer.strip()!r} = {state}")
        t = self.query_number("sweep.time_query", self.map.sweep_time_query)
        if t is not None:
            self.report.add("sweep.time_query", "ok", f"{t:g} s")

    def restore(self) -> None:
        """Put back every setting read at the start (stop first if start must go up)."""
        present = self.report.present
        s = self.map.settings
        if "start_hz" in present and "stop_hz" in present:
            for name in ("stop_hz", "start_hz", "stop_hz"):
                self._quiet_write(s[name].set.format(value=format_number(present[name])))
        for name in ("points", "ifbw_hz", "power_dbm"):
            if name in present:
                value = round(present[name]) if name == "points" else present[name]
                self._quiet_write(s[name].set.format(value=format_number(value)))
        if "spacing" in present:
            self._quiet_write(s["spacing"].command(present["spacing"]))

    def _quiet_write(self, command: str) -> None:
        try:
            self.link.write(command)
            self.vna.drain_errors()
        except DriverError:
            self.report.add("restore", "fail", f"could not restore with {command!r}")

    def limits(self) -> None:
        present = self.report.present
        s = self.map.settings
        lim = self.map.limits
        tries: list[tuple[str, str, float]] = [
            ("frequency_hz", "stop_hz", lim.frequency_hz.max),
            ("frequency_hz", "start_hz", lim.frequency_hz.min),
            ("points", "points", lim.points.min),
            ("points", "points", lim.points.max),
            ("ifbw_hz", "ifbw_hz", lim.ifbw_hz.min),
            ("ifbw_hz", "ifbw_hz", lim.ifbw_hz.max),
            ("power_dbm", "power_dbm", lim.power_dbm.min),
        ]
        accepted: dict[str, list[float]] = {}
        for limit, name, value in tries:
            number: float = round(value) if name == "points" else value
            key = f"limits.{limit}." + ("min" if value == getattr(lim, limit).min else "max")
            needed = ("start_hz", "stop_hz") if limit == "frequency_hz" else (name,)
            if not all(k in present for k in needed):
                # Without the present value there is nothing to restore: leave it alone.
                self.report.add(key, "info", "not tried: the present setting could not be read")
                continue
            command = s[name].set.format(value=format_number(number))
            if self.write(key, command, template_key=f"sweep.{name}.set"):
                back = self.query_number(key, s[name].query)
                if back is not None and math.isclose(back, number, rel_tol=1e-6, abs_tol=1e-9):
                    self.report.add(key, "ok", f"{name} = {number:g} accepted")
                    accepted.setdefault(limit, []).append(number)
                elif back is not None:
                    self.report.add(
                        key, "fail", f"{name} = {number:g} was set to {back:g} by the instrument"
                    )
            self.restore()
        self.report.add(
            "limits.power_dbm.max",
            "info",
            f"{lim.power_dbm.max:g} dBm not tried: a probe never raises the source power; "
            "check it in the instrument's manual",
        )
        for limit, values in accepted.items():
            self.report.accepted_limits[limit] = (min(values), max(values))

    def spacing(self) -> None:
        s = self.map.settings["spacing"]
        for choice in s.choices or {}:
            key = f"sweep.spacing.values.{choice}"
            if self.write(key, s.command(choice), template_key="sweep.spacing.set"):
                answer = self.query(key, s.query)
                if answer is not None:
                    got = s.parse_choice(answer)
                    status = "ok" if got == choice else "fail"
                    self.report.add(key, status, f"{s.command(choice)!r} read back {answer!r}")
        self.restore()

    def data_format(self) -> None:
        for command in self.map.format_commands:
            if self.write("data.format_commands", command):
                self.report.add("data.format_commands", "ok", f"{command!r} accepted")
        query = self.map.frequency_query
        if query is None:
            self.report.add(
                "data.frequency_query",
                "info",
                "none in the map: frequencies are computed from start, stop, points, spacing",
            )
            return
        try:
            f = self.vna.frequencies()
        except InstrumentTimeout:
            self.report.add("data.frequency_query", "fail", f"{query!r}: no answer; {self.why()}")
            return
        except (TransportError, DriverError) as exc:
            self.report.add("data.frequency_query", "fail", f"{query!r}: {_short(exc)}")
            return
        present = self.report.present
        n = round(present.get("points", f.size))
        good = (
            f.size == n
            and bool(np.all(np.isfinite(f)))
            and math.isclose(f[0], present.get("start_hz", f[0]), rel_tol=1e-6)
            and math.isclose(f[-1], present.get("stop_hz", f[-1]), rel_tol=1e-6)
        )
        detail = f"{f.size} values in {self.map.data_format} ({f[0]:g} … {f[-1]:g} Hz)"
        if not good:
            detail += (
                f"; expected {n} from {present.get('start_hz')} to {present.get('stop_hz')} Hz: "
                "check data.format and data.byte_order"
            )
        self.report.add("data.format (round trip)", "ok" if good else "fail", detail)

    def short_sweep(self) -> None:
        present = self.report.present
        if not all(k in present for k in (*NUMERIC, "spacing")):
            self.report.add("sweep", "info", "not tried: a setting could not be read")
            return
        lim = self.map.limits
        plan = SweepPlan(
            start_hz=present["start_hz"],
            stop_hz=present["stop_hz"],
            points=int(max(lim.points.min, min(11, lim.points.max))),
            spacing=present["spacing"],
            ifbw_hz=present["ifbw_hz"],
            power_dbm=present["power_dbm"],
        )
        try:
            self.vna.configure(plan)
            data = self.vna.sweep()
        except InstrumentError as exc:
            self.report.add("sweep", "fail", f'{exc.command!r} refused: {exc.code},"{exc.text}"')
        except InstrumentTimeout as exc:
            self.report.add("sweep", "fail", f"{exc.operation}: no answer; {self.why()}")
        except DriverError as exc:
            self.report.add("sweep", "fail", _short(exc))
        else:
            for name, trace in data.traces.items():
                good = bool(np.all(np.isfinite(trace)))
                self.report.add(
                    f"data.traces ({name})",
                    "ok" if good else "fail",
                    f"{trace.size} points, |{name}| {np.abs(trace).min():.3g} … "
                    f"{np.abs(trace).max():.3g}, sync by {self.map.sync.method}",
                )
        finally:
            self.restore()


def probe(
    transport: Any,
    cmap: CommandMap,
    *,
    sweep: bool = False,
    progress: Callable[[str], None] | None = None,
) -> ProbeReport:
    """Check ``cmap`` against the instrument on ``transport``; see the module docstring."""
    report = ProbeReport(cmap.name, getattr(transport, "resource_name", "<transport>"))
    prober = _Prober(transport, cmap, report)
    steps = [
        ("identity and error queue", prober.errors_and_identity),
        ("settings", prober.settings),
        ("limits", prober.limits),
        ("spacing", prober.spacing),
        ("data format", prober.data_format),
    ]
    if sweep:
        steps.append(("short sweep", prober.short_sweep))
    for label, step in steps:
        if progress is not None:
            progress(label)
        step()
    return report


# The present setting that stands in for a limit the instrument refused.
_PRESENT_FOR_LIMIT = {
    ("frequency_hz", "min"): "start_hz",
    ("frequency_hz", "max"): "stop_hz",
    ("points", "min"): "points",
    ("points", "max"): "points",
    ("ifbw_hz", "min"): "ifbw_hz",
    ("ifbw_hz", "max"): "ifbw_hz",
    ("power_dbm", "min"): "power_dbm",
}


def draft_map(raw: dict[str, Any], report: ProbeReport) -> dict[str, Any]:
    """A map skeleton from ``raw`` (the probed map as parsed YAML) and what the instrument
    answered: its identity in the description, and each limit it refused replaced by
    the present setting it does hold (a value it is known to accept)."""
    draft = dict(raw)
    draft["name"] = f"{raw.get('name', 'map')}-draft"
    draft["description"] = f"Draft from zbench probe of: {report.identity or 'no identity'}"
    limits = {key: dict(value) for key, value in raw.get("limits", {}).items()}
    for check in report.failed:
        parts = check.key.split(".")
        if parts[0] != "limits" or len(parts) != 3 or parts[1] not in limits:
            continue
        present = report.present.get(_PRESENT_FOR_LIMIT.get((parts[1], parts[2]), ""))
        if present is not None:
            limits[parts[1]][parts[2]] = present
    draft["limits"] = limits
    return draft


def _short(exc: BaseException) -> str:
    return str(exc).split("\n", 1)[0]
