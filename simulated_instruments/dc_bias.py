"""DC bias circuit of the simulated bench: a current-limited source charging the load.

The source (set point ``Vs``, current limit ``I``) drives the selected fixture position
through the bias path resistance ``R`` (source output, bias tee, wiring). The load is
what the selected position holds at DC: a capacitor (``C`` with a leakage resistance), a
resistance (an inductor's or bead's winding, the shorting strap) or nothing.

A capacitor charges as an RC circuit, ``v(t) = Vs + (v0 − Vs)·exp(−t/RC)``; while the
current ``(Vs − v)/R`` would exceed the limit the source runs at constant current and
``v`` ramps at ``I/C`` (a constant-current phase, then the RC tail). Output OFF programs
0 V with active discharge through the same path (the safe state). A newly connected
capacitor starts discharged (the switch and the placing hands leave no charge on it).
The capacitance used for charging is the part's unbiased value, a fair first-order view
of the charge current (class II parts store less charge than this at high bias).
"""

from __future__ import annotations

import math
from dataclasses import dataclass


@dataclass(frozen=True)
class DcLoad:
    """What the bias source sees: ``kind`` ``"open"``, ``"resistor"`` or ``"capacitor"``;
    ``resistance`` (Ω, for a resistor or a capacitor's leakage); ``capacitance`` (F);
    ``key`` identifies the physical load (so reconnecting the same one keeps its charge)."""

    kind: str
    resistance: float = math.inf
    capacitance: float = 0.0
    key: str = ""


OPEN = DcLoad("open", key="open")


def capacitor_voltage(
    t: float, v0: float, vs: float, r: float, c: float, i_limit: float
) -> tuple[float, float]:
    """(capacitor voltage V, current A) ``t`` seconds after ``vs`` was applied to a
    capacitor ``c`` (F) at ``v0`` volts through ``r`` (Ω), current limited to ``i_limit``.

    Leakage is neglected in the transient (its current is added by the caller).
    """
    dv = vs - v0
    if dv == 0:
        return v0, 0.0
    sign = 1.0 if dv > 0 else -1.0
    t1 = 0.0
    if abs(dv) > i_limit * r:
        # Constant-current phase until the remaining step is I·R.
        t1 = c * (abs(dv) - i_limit * r) / i_limit
        if t < t1:
            return v0 + sign * i_limit * t / c, sign * i_limit
        v_start = vs - sign * i_limit * r
    else:
        v_start = v0
    tau = r * c
    v = vs + (v_start - vs) * math.exp(-(t - t1) / tau)
    return v, (vs - v) / r


@dataclass
class DcBias:
    """State of the bias source and its load; times in simulated seconds."""

    max_voltage: float
    max_current: float
    series_resistance: float
    setpoint: float = 0.0
    current_limit: float = 0.0
    output: bool = False
    load: DcLoad = OPEN
    _t0: float = 0.0
    _v0: float = 0.0

    def __post_init__(self) -> None:
        if self.current_limit == 0.0:
            self.current_limit = self.max_current

    def _applied(self) -> float:
        return self.setpoint if self.output else 0.0

    def load_voltage(self, now: float) -> float:
        """Voltage (V) across the load at ``now``."""
        return self._state(now)[0]

    def _state(self, now: float) -> tuple[float, float, float]:
        """(load voltage, current, terminal voltage) at ``now``."""
        vs = self._applied()
        r = self.series_resistance
        lim = max(self.current_limit, 1e-12)
        load = self.load
        if load.kind == "open":
            return vs, 0.0, vs
        if load.kind == "resistor":
            i = vs / (r + load.resistance)
            if abs(i) > lim:
                i = math.copysign(lim, i)
                return i * load.resistance, i, i * (r + load.resistance)
            return i * load.resistance, i, vs
        v, i = capacitor_voltage(now - self._t0, self._v0, vs, r, load.capacitance, lim)
        leak = v / load.resistance if math.isfinite(load.resistance) else 0.0
        return v, i + leak, v + i * r

    def change(self, now: float, **settings: object) -> None:
        """Apply new settings (``setpoint``, ``current_limit``, ``output``) at ``now``."""
        v = self.load_voltage(now) if self.load.kind == "capacitor" else 0.0
        for key, value in settings.items():
            setattr(self, key, value)
        self._t0, self._v0 = now, v

    def connect(self, now: float, load: DcLoad) -> None:
        """Connect ``load`` at ``now``; a different capacitor starts discharged."""
        if load.key == self.load.key:
            return
        self.load = load
        self._t0, self._v0 = now, 0.0

    def measure(self, now: float) -> tuple[float, float]:
        """(terminal voltage V, output current A) as the source would read them."""
        _, i, v_term = self._state(now)
        return v_term, i
