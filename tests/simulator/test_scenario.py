"""Scenarios: strict loading, seeded samples, reproducible benches."""

from __future__ import annotations

import numpy as np
import pytest
import yaml

from bench.errors import InputError
from simulated_instruments.scenario import SCENARIO_DIR, load_scenario


def demo_data() -> dict:
    return yaml.safe_load((SCENARIO_DIR / "demo.yaml").read_text(encoding="utf-8"))


def test_demo_scenario_has_the_promised_parts_and_limits():
    sc = load_scenario("demo")
    assert sc.positions == 8
    expected = {
        "MC22-6V3": 3,
        "MC4U7-10V": 3,
        "MC100N-16V": 3,
        "PB345-7V1": 2,
        "PL530N": 2,
        "FB137": 2,
    }
    for name, count in expected.items():
        assert [f"{name}/s{k}" for k in range(1, count + 1)] == [
            key for key in sc.parts if key.startswith(name + "/")
        ]
    a = sc.analyzer
    assert (a.f_min, a.f_max, a.points_max, a.power_min, a.power_max) == (
        10.0,
        500e6,
        20001,
        -30.0,
        10.0,
    )
    assert (a.ifbw_min, a.ifbw_max, sc.dc_max_voltage, sc.dc_max_current) == (1, 100e3, 20, 0.1)
    # Mounts differ from position to position.
    assert len({m.inductance for m in sc.mounts}) == 8
    assert load_scenario("bench_single").positions == 1


def test_samples_are_seeded_and_spread_realistically():
    a, b, c = (
        load_scenario("demo", seed=3),
        load_scenario("demo", seed=3),
        load_scenario("demo", seed=4),
    )
    assert a.parts == b.parts
    assert a.parts["MC22-6V3/s1"] != c.parts["MC22-6V3/s1"]
    caps = np.array([a.parts[f"MC22-6V3/s{k}"].capacitance for k in (1, 2, 3)])
    assert len(set(caps)) == 3
    # Lot spread of a few per cent around the 22 µF nominal (default one-sigma 3 %).
    assert np.all(np.abs(caps / 22e-6 - 1) < 0.15)


@pytest.mark.parametrize(
    ("change", "words"),
    [
        (lambda d: d.update(colour="blue"), ["colour"]),
        (lambda d: d["analyzer"].update(points_max=5), ["analyzer", "points_max"]),
        (lambda d: d["fixture"]["mounts"].pop(), ["7 entries", "8 positions"]),
        (lambda d: d["parts"]["FB137"]["circuit"].update(type="resistor"), ["FB137", "type"]),
        (lambda d: d["parts"]["FB137"]["circuit"].update(inductance="fast"), ["FB137"]),
        (lambda d: d["initial"].update(placements={"3": "NOPE/s1"}), ["NOPE/s1"]),
        (lambda d: d["analyzer"].update(glitches={"rate": 0.5}), ["glitches", "rate"]),
        (lambda d: d["analyzer"].update(glitches={"size": 0}), ["glitches", "size"]),
    ],
)
def test_bad_scenarios_are_clear_input_errors(change, words):
    data = demo_data()
    change(data)
    with pytest.raises(InputError) as info:
        load_scenario(data)
    for word in words:
        assert word in str(info.value)


def test_unknown_scenario_name_lists_the_known_ones():
    with pytest.raises(InputError) as info:
        load_scenario("no-such-bench")
    assert "demo" in str(info.value) and "bench_single" in str(info.value)


def test_same_seed_same_bench(sim_bench_factory, bench_client):
    """Two benches with one seed give the same raw data, sweep for sweep."""
    results = []
    for _ in range(2):
        client = bench_client(sim_bench_factory("demo", seed=11))
        client.configure(1e3, 1e8, 101)
        client.do('OPER:PLAC 6,"MC100N-16V/s2"')
        client.select(6)
        results.append(client.sweep()[1])
    np.testing.assert_array_equal(results[0], results[1])


def test_a_sweep_draws_its_noise_whatever_the_last_bits_of_its_grid():
    """numpy's vectorised log and power differ in the last bit between instruction sets,
    so one sweep's grid computed on two machines may differ there: the noise must not."""
    from simulated_instruments.state import BenchState, SweepPlan

    f = np.geomspace(1e3, 1e8, 101)
    nudged = f.copy()
    nudged[::7] = np.nextafter(nudged[::7], np.inf)
    assert not np.array_equal(f, nudged)
    draws = []
    for grid in (f, nudged):
        state = BenchState(load_scenario("demo"), time_scale=1.0)
        plan = SweepPlan(f=grid, power_dbm=0.0, if_bandwidth=1e3, corrected=False)
        draws.append(state.sweep_rng(plan).standard_normal(8))
    np.testing.assert_array_equal(draws[0], draws[1])


def test_correction_on_returns_data_at_the_cable_ends(sim_bench, bench_client):
    client = bench_client(sim_bench)
    client.configure(1e3, 1e8, 101, ifbw=10)
    client.do('OPER:PLAC 6,"MC100N-16V/s2"')
    client.select(6)
    client.vna.write("SENS:CORR ON")
    f, s = client.sweep()
    truth = sim_bench.state.true_s(f)
    # Only noise is left: at 10 Hz IFBW a −120 dB floor and 0.001 dB trace noise
    # (ε about 1.6e-4 RMS), so a few times 1e-4 at the worst of 404 values.
    assert np.max(np.abs(s - truth)) < 1e-3
    assert np.sqrt(np.mean(np.abs(s - truth) ** 2)) < 2e-4


def test_a_folder_named_like_a_scenario_does_not_hide_it(tmp_path, monkeypatch):
    # `zbench demo --out demo` makes a folder `demo` in the working directory first.
    monkeypatch.chdir(tmp_path)
    (tmp_path / "demo").mkdir()
    by_name = load_scenario("demo")
    assert by_name.parts == load_scenario(SCENARIO_DIR / "demo.yaml").parts


def test_glitches_are_rare_points_off_by_their_size_and_cost_no_draws_when_off():
    from simulated_instruments import physics

    s = np.ones((200_000, 2, 2), dtype=complex)
    rng = np.random.default_rng(5)
    state = rng.bit_generator.state
    assert physics.add_glitches(s, rng, 0.0, 0.3) is s
    assert rng.bit_generator.state == state  # the sweep's noise stream is untouched
    out = physics.add_glitches(s, rng, 0.004, 0.3)
    hit = np.any(out != 1, axis=(1, 2))
    # Binomial count: 800 expected, one sigma about 28 (four sigmas allowed).
    assert abs(int(hit.sum()) - 800) < 4 * 28
    # Every element of a glitched point's S-matrix moves alike, by |ln factor| = size.
    factor = out[hit, 0, 0]
    assert np.allclose(out[hit], factor[:, None, None])
    assert np.allclose(np.abs(np.log(factor)), 0.3)
    assert load_scenario("demo_glitches").analyzer.glitch_rate == 0.004
    assert load_scenario("demo").analyzer.glitch_rate == 0.0
