"""Measure one simulated part end to end through the drivers alone.

Starts the simulated bench on loopback, normalises to a through, places an invented
22 µF MLCC in fixture position 1, sweeps, and computes Z with the shunt-through
formula Z = (Z0/2)·S21n/(1 − S21n) (docs/design.md §4). Run: python examples/measure_one_part.py
"""

import numpy as np

from drivers.analyzer import NetworkAnalyzer, SweepPlan
from drivers.bench_control import BenchControl
from drivers.switch import FixtureSwitch
from drivers.transport import VisaTransport
from simulated_instruments.server import start_bench

Z0 = 50.0
plan = SweepPlan(start_hz=100.0, stop_hz=100e6, points=201, spacing="log", ifbw_hz=100.0)

with (
    start_bench("demo", time_scale=0.01, seed=1) as sim,
    VisaTransport.open(sim.resources["analyzer"]) as vna_link,
    VisaTransport.open(sim.resources["switch"]) as switch_link,
    VisaTransport.open(sim.resources["bench"]) as bench_link,
):
    vna = NetworkAnalyzer(vna_link, "default")
    switch = FixtureSwitch(switch_link, positions=8)
    hands = BenchControl(bench_link)
    print(vna.identify())
    vna.configure(plan)

    hands.connect_through()  # through normalisation: S21n = S21 / S21_through
    through = vna.sweep(["S21"])["S21"]

    hands.place(1, "MC22-6V3/s1")
    hands.connect_fixture()
    switch.select(1)
    data = vna.sweep(["S21"])

    s21n = data["S21"] / through
    z = (Z0 / 2) * s21n / (1 - s21n)
    for f_hz in (1e3, 1e5, 1e6, 1e7):
        k = np.argmin(abs(data.f - f_hz))
        phase = np.angle(z[k], deg=True)
        print(f"{data.f[k]:>10.4g} Hz   |Z| = {abs(z[k]):.4g} Ω   phase {phase:+.1f}°")
