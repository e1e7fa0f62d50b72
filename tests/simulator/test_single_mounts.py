"""The series-through and reflection mounts, reached over SCPI only (pyvisa-py sockets).

The hands move the cables to a mount and fit what it holds (an empty gap or open, the
zero-ohm strap, a part); the analyser's S-parameters at the cable ends follow the
two-port algebra of a series element and of a one-port load.
"""

from __future__ import annotations

import numpy as np

from bench.core.impedance import impedance_from_reflection, impedance_from_series_through
from tests.simulator.test_instruments import drain_errors

PART = "PL530N/s1"
BEAD = "FB137/s1"


def test_nodes_move_cables_and_fill_the_mounts(sim_bench, open_instrument):
    hands = open_instrument(sim_bench, "bench")
    hands.write("OPERator:CABLes SERies")
    assert hands.query("OPER:CABL?") == "SER"
    hands.write("OPER:CABL REFL")
    assert hands.query("OPER:CABL?") == "REFL"
    assert hands.query("OPER:MOUN? SER") == "GAP"
    hands.write("OPERator:MOUNt SERies,STRAp")
    assert hands.query("OPER:MOUN? SER") == "STRA"
    hands.write(f'OPER:MOUN REFL,"{PART}"')
    assert hands.query("OPER:MOUN? REFL") == f'"{PART}"'
    hands.write("OPER:MOUN REFL,OPEN")
    assert hands.query("OPER:MOUN? REFL") == "GAP"
    hands.write('OPER:MOUN SER,"NOPART/s1"')
    hands.write("OPER:MOUN SIDE,GAP")
    hands.write("OPER:MOUN SER")
    assert [e[:4] for e in drain_errors(hands)] == ["-224", "-141", "-109"]
    assert sim_bench.state.mounted == {"SERIES": "SHORT", "REFLECTION": "EMPTY"}


def _corrected(client, start=1e3, stop=200e6, points=41):
    client.vna.write("SENS:CORR ON")
    client.configure(start, stop, points, ifbw=100.0)
    return client.sweep()


def test_series_mount_is_a_series_element_between_the_cable_ends(sim_bench, bench_client):
    client = bench_client(sim_bench)
    client.do("OPER:CABL SER")
    client.do(f'OPER:MOUN SER,"{PART}"')
    f, s = _corrected(client)
    z = sim_bench.state.mount_impedance("SERIES", f)
    # A series impedance Z between two Z0 ports: S21 = 2Z0/(2Z0 + Z), S11 = Z/(2Z0 + Z)
    # (Pozar, Microwave Engineering, table 4.2, series element; from memory).
    np.testing.assert_allclose(s[:, 1, 0], 100 / (100 + z), rtol=3e-3, atol=1e-6)
    np.testing.assert_allclose(s[:, 0, 0], z / (100 + z), rtol=3e-3, atol=1e-5)
    # The mount's own parasitics are in what the cable ends see: the gap's capacitance
    # across the part and the strap's inductance instead of it.
    mount = sim_bench.state.scenario.series_mount
    w = 2 * np.pi * f
    np.testing.assert_allclose(
        sim_bench.state.mount_impedance("SERIES", f),
        mount.resistance
        + 1j * w * mount.inductance
        + 1
        / (1 / sim_bench.state.scenario.parts[PART].impedance(f) + 1j * w * mount.open_capacitance),
    )
    client.do("OPER:MOUN SER,STRA")
    _, s_strap = client.sweep()
    strap = (
        mount.resistance
        + mount.strap_resistance
        + 1j * w * (mount.inductance + mount.strap_inductance)
    )
    np.testing.assert_allclose(s_strap[:, 1, 0], 100 / (100 + strap), rtol=3e-3)


def test_reflection_mount_is_a_one_port_load_on_port_1(sim_bench, bench_client):
    client = bench_client(sim_bench)
    client.do("OPER:CABL REFL")
    client.do(f'OPER:MOUN REFL,"{BEAD}"')
    f, s = _corrected(client)
    z = sim_bench.state.mount_impedance("REFLECTION", f)
    # Γ = (Z − Z0)/(Z + Z0) of a one-port load (Pozar, eq. 2.35; from memory).
    np.testing.assert_allclose(s[:, 0, 0], (z - 50) / (z + 50), rtol=2e-3, atol=2e-4)
    assert np.all(np.abs(s[:, 1, 0]) < 1e-3)  # nothing reaches port 2


def test_gap_and_strap_remove_the_series_mount(sim_bench, bench_client):
    """The series mount's own captures are its fixture removal: the part comes back."""
    client = bench_client(sim_bench)
    client.do("OPER:CABL SER")
    captures = {}
    for item in ("GAP", "STRA", f'"{PART}"'):
        client.do(f"OPER:MOUN SER,{item}")
        captures[item] = _corrected(client)
    f = captures["GAP"][0]
    z_gap = 100 * (1 / captures["GAP"][1][:, 1, 0] - 1)
    z_strap = 100 * (1 / captures["STRA"][1][:, 1, 0] - 1)
    data = impedance_from_series_through(
        f, captures[f'"{PART}"'][1][:, 1, 0], mount_short=z_strap, mount_open=z_gap
    )
    truth = sim_bench.state.scenario.parts[PART].impedance(f)
    mount = sim_bench.state.scenario.series_mount
    strap = mount.strap_resistance + 2j * np.pi * f * mount.strap_inductance
    inside = data.inside_window
    assert inside.sum() >= 10  # above about 13 Ω: the inductor from a few MHz up
    # What stays is the strap itself, which the short capture cannot tell from the mount.
    np.testing.assert_allclose(data.z[inside], (truth - strap)[inside], rtol=0.02)


def test_open_and_strap_remove_the_reflection_mount(sim_bench, bench_client):
    client = bench_client(sim_bench)
    client.do("OPER:CABL REFL")
    captures = {}
    for item in ("OPEN", "STRA", f'"{BEAD}"'):
        client.do(f"OPER:MOUN REFL,{item}")
        captures[item] = _corrected(client)
    f = captures["OPEN"][0]

    def z_of(g):
        return 50 * (1 + g) / (1 - g)

    z_short = z_of(captures["STRA"][1][:, 0, 0])
    z_open = z_of(captures["OPEN"][1][:, 0, 0]) - z_short
    data = impedance_from_reflection(
        f, captures[f'"{BEAD}"'][1][:, 0, 0], mount_short=z_short, open_admittance=1 / z_open
    )
    truth = sim_bench.state.scenario.parts[BEAD].impedance(f)
    inside = data.inside_window
    assert inside.sum() >= 15  # above about 1.3 Ω: the bead from about 1 MHz up
    np.testing.assert_allclose(data.z[inside], truth[inside], rtol=0.03)
