"""DC bias through the simulated source: charging current, limits, bias on the part."""

from __future__ import annotations

import time

import numpy as np
import pytest


def wait_for(predicate, timeout: float = 10.0) -> bool:
    """Poll until ``predicate()`` holds (a behaviour check, not a timing one)."""
    deadline = time.monotonic() + timeout
    while time.monotonic() < deadline:
        if predicate():
            return True
        time.sleep(0.01)
    return predicate()


def test_charging_current_of_a_bulk_capacitor(sim_bench_factory, bench_client):
    # Slowed down 20×: the 345 µF part charges at the 100 mA limit for about 17 ms of
    # simulated time (C·ΔV/I = 345 µF × 4.8 V / 0.1 A), 0.3 s here.
    bench = sim_bench_factory("demo", time_scale=20.0)
    client = bench_client(bench)
    client.do('OPER:PLAC 1,"PB345-7V1/s1"')
    client.select(1)
    dc = client.dc
    dc.write("SOUR:CURR 0.1;:SOUR:VOLT 5;:OUTP ON")
    first = float(dc.query("MEAS:CURR?"))
    v_first = float(dc.query("MEAS:VOLT?"))
    # Constant-current phase: the source sits at its limit, its terminals below 5 V.
    assert first == pytest.approx(0.1, rel=0.01)
    assert v_first < 4.9
    # Settled: only the leakage is left, 5 V / 500 kΩ = 10 µA (scenario value).
    assert wait_for(lambda: abs(float(dc.query("MEAS:CURR?")) - 10e-6) < 3e-6)
    assert float(dc.query("MEAS:VOLT?")) == pytest.approx(5.0, abs=1e-3)
    assert bench.state.bias_voltage() == pytest.approx(5.0, abs=1e-3)
    dc.write("OUTP OFF")
    # Output off discharges the part through the source, current flowing back.
    assert float(dc.query("MEAS:CURR?")) == pytest.approx(-0.1, rel=0.01)
    assert wait_for(lambda: abs(float(dc.query("MEAS:VOLT?"))) < 1e-3)
    client.check(dc)


def test_resistive_load_runs_into_the_current_limit(sim_bench, bench_client):
    client = bench_client(sim_bench)
    client.do('OPER:PLAC 7,"PL530N/s1"')
    client.select(7)
    dc = client.dc
    dc.write("SOUR:CURR 20MA;:SOUR:VOLT 2;:OUTP ON")
    # An inductor is a short at DC: the source limits at 20 mA and its voltage collapses
    # to 20 mA × (2 Ω path + 1.5 mΩ winding + mount).
    assert float(dc.query("MEAS:CURR?")) == pytest.approx(0.02, rel=1e-3)
    assert float(dc.query("MEAS:VOLT?")) == pytest.approx(0.04, abs=1e-3)
    dc.write("OUTP OFF")
    client.check(dc)


def test_bias_lowers_the_capacitance_of_a_class_ii_mlcc(sim_bench, bench_client):
    """C(V) = C0/(1 + (V/V50)²) (docs/references.md §5 simulator heuristic, derived from a
    published 0805 X7R measurement); V50 = 0.51 × 10 V rated for the X7R part, so at
    5.1 V the capacitance halves."""
    client = bench_client(sim_bench)
    client.configure(10e3, 100e3, 21)
    client.do("OPER:TRAN ON")
    client.do("OPER:CABL THR")
    _, through = client.sweep()
    client.do("OPER:CABL FIXT")
    client.do('OPER:PLAC 2,"MC4U7-10V/s1"')
    client.select(2)
    part = sim_bench.scenario.parts["MC4U7-10V/s1"]
    truth: list[float] = []

    def capacitance(volts: float) -> float:
        client.dc.write(f"SOUR:VOLT {volts};:OUTP ON")
        assert wait_for(lambda: abs(float(client.dc.query("MEAS:CURR?"))) < 1e-4)
        f, s = client.sweep()
        s21n = s[:, 1, 0] / through[:, 1, 0]
        z = 25 * s21n / (1 - s21n)  # shunt-through, docs/design.md §4
        # The true part read the same way: its causal dielectric's capacitance is the
        # nominal one at 1 kHz and falls slowly with frequency (docs/references.md §9).
        truth.append(float(np.median(-1 / (2 * np.pi * f * part.impedance(f, volts).imag))))
        return float(np.median(-1 / (2 * np.pi * f * z.imag)))

    # Each sample of the lot has its own half-capacitance voltage (spread about the
    # dielectric's 0.51 × 10 V = 5.1 V).
    v50 = part.v50_volts
    assert v50 == pytest.approx(5.1, rel=0.25)
    c0 = capacitance(0.0)
    c_half = capacitance(v50)
    c_rated = capacitance(10.0)
    client.dc.write("OUTP OFF")
    assert c0 == pytest.approx(truth[0], rel=0.05)
    assert truth[0] == pytest.approx(part.capacitance, rel=0.1)
    assert c_half / c0 == pytest.approx(0.5, rel=0.02)
    # At the rated 10 V: 1/(1 + (10/v50)²), about 0.21 for 5.1 V (derived); "up to 70 %
    # loss at rated voltage" (Prymak et al., CARTS 2010, docs/references.md §5) is the
    # order of it.
    assert c_rated / c0 == pytest.approx(1 / (1 + (10 / v50) ** 2), rel=0.03)


def test_samples_of_a_lot_lose_different_shares_under_bias():
    import numpy as np

    from simulated_instruments.parts import DEFAULT_SPREAD, Mlcc, with_spread

    base = Mlcc(name="MCX", capacitance=4.7e-6, rated_voltage=10.0, dielectric="X7R")
    rng = np.random.default_rng(3)
    lot = [with_spread(base, rng, DEFAULT_SPREAD["mlcc"]) for _ in range(5)]
    shares = [p.capacitance_at(6.0) / p.capacitance_at(0.0) for p in lot]
    assert len({round(x, 4) for x in shares}) == 5
    assert max(shares) - min(shares) > 0.01
