"""Loss across the band: the Q (dielectric), S and K (conductor) elements, their
published check values, their SPICE ladders in ngspice, and the two exports of a part.

Sources (docs/references.md §9): constant loss tangent ``ESR ≈ tanδ/(ωC)`` below
resonance [derived]; the wideband Debye ladder behind Q's (Djordjevic, Biljić,
Likar-Smiljanić, Sarkar, IEEE Trans. EMC 43(4), 2001, from memory); the skin-effect
R-L ladder (Kim and Neikirk, 1996, from memory); conductor loss √f with
Im Z = Re Z above the skin corner [derived, the surface impedance (1 + j)·Rs]; the
constant-phase capacitance and its power-law ladder (docs/references.md §16: Jonscher
1977, from memory; check values derived there); the conductor with a skin corner
``R·√(1 + jω/ωc)`` and its R‖L ladder (docs/references.md §17, limits derived there).
"""

from __future__ import annotations

import numpy as np
import pytest

from bench.core.fit_network import compiled, values_to_q
from bench.core.fitting import fit_impedance
from bench.core.models import lossy_rlc
from bench.core.models.network import (
    K,
    Q,
    R,
    S,
    conductor_continuum,
    conductor_ladder,
    constant_phase_continuum,
    constant_phase_ladder,
    impedance_and_jacobian,
    network_impedance,
    series,
    skin_continuum,
    skin_ladder,
    spice_lines,
)
from bench.core.models.network import L as Ind
from bench.core.spice import library_text, on_mount_subckt_text, spice_name, subckt_text
from tests.core.ngspice import needs_ngspice, run_ngspice


def test_skin_ladder_follows_its_limit():
    # √f conductor loss: Re Z = S·√(f / 1 MHz), Im Z ≈ Re Z inside the band [derived],
    # three decades inside the band's edges (the sections below a frequency add up as √f,
    # those above it as 1/√f, so a band cut short lowers Re Z by about √(f_lo/f) and
    # Im Z by about √(f/f_hi)).
    f = np.logspace(4, 7, 61)
    jw = 2j * np.pi * f
    z = network_impedance(S("S", (10.0, 1e10)), f, {"S": 1.0})
    np.testing.assert_allclose(z.real, np.sqrt(f / 1e6), rtol=0.05)
    np.testing.assert_allclose(z.imag, z.real, rtol=0.05)
    np.testing.assert_allclose(z, skin_continuum(jw, (10.0, 1e10)), rtol=0.01)


def test_ladders_are_passive_and_sized_from_the_element():
    rl = skin_ladder(0.01, (1e2, 1e8))
    assert len(rl) == 12  # two sections per decade over six decades
    assert all(r > 0 and ind > 0 for r, ind in rl)
    # Corners R/L of the sections are log-spaced, one per half decade [derived].
    corners = np.array([r / ind for r, ind in rl])
    np.testing.assert_allclose(np.diff(np.log10(corners)), 0.5, rtol=1e-9)


# A Q element whose band is centred on 1 kHz, so that its C is the capacitance at 1 kHz.
Q_BAND = (1.0, 1e6)


@pytest.mark.parametrize(("f", "esr", "c"), [(1e3, 0.7938, 10e-6), (10e3, 85.41e-3, 9.294e-6)])
def test_constant_phase_check_values(f, esr, c):
    # docs/references.md §16 [derived]: 10 µF at 1 kHz, tanδ = 0.05 -> ESR 0.7938 Ω at
    # 1 kHz; at 10 kHz the capacitance has fallen by 10^(−n) to 9.294 µF, ESR 85.41 mΩ.
    values = {"C": 10e-6, "tanC": 0.05}
    z = network_impedance(Q("C", Q_BAND), np.array([f]), values)[0]
    assert z.real == pytest.approx(esr, rel=0.005)
    y = 1 / z
    assert y.imag / (2 * np.pi * f) == pytest.approx(c, rel=0.005)
    assert y.real / y.imag == pytest.approx(0.05, rel=0.005)  # the loss tangent itself


@pytest.mark.parametrize("tan_delta", [0.003, 0.05, 0.3])
def test_constant_phase_ladder_follows_its_limit_inside_the_band(tan_delta):
    # The ladder against the continuous constant-phase form, over the band a decade
    # inside the element's (as the fitter places it): 0.3 % in ESR and in |Y|
    # (docs/references.md §16).
    band = (10.0, 2e9)
    f = np.logspace(2, np.log10(2e8), 241)
    values = {"C": 1.0, "tanC": tan_delta}
    y = 1 / network_impedance(Q("C", band), f, values)
    exact = constant_phase_continuum(2j * np.pi * f, tan_delta, band)
    np.testing.assert_allclose(np.abs(y), np.abs(exact), rtol=3e-3)
    np.testing.assert_allclose((1 / y).real, (1 / exact).real, rtol=3e-3)
    c_par, branches = constant_phase_ladder(1e-6, tan_delta, band)
    assert c_par > 0 and all(r > 0 and c > 0 for r, c in branches)


@pytest.mark.parametrize("corner", [10.0, 15e6, 1e9])
def test_conductor_ladder_follows_its_limit_inside_the_band(corner):
    # The ladder against R·√(1 + jω/ωc) (docs/references.md §17) over the band two
    # decades inside the element's (as the fitter places it): 0.4 % in Z, whatever the
    # corner inside the element's band.
    band = (1.0, 2e10)
    f = np.logspace(2, np.log10(2e8), 241)
    values = {"R": 2.5e-3, "fcR": corner}
    z = network_impedance(K("R", band), f, values)
    exact = 2.5e-3 * conductor_continuum(2j * np.pi * f, corner)
    np.testing.assert_allclose(z, exact, rtol=4e-3)
    r0, sections, l_tail = conductor_ladder(2.5e-3, corner, band)
    assert r0 == 2.5e-3 and l_tail > 0 and all(r > 0 and ind > 0 for r, ind in sections)
    # The sections' corners R/L are the same multiples of ωc whatever the corner.
    base = [r / ind for r, ind in conductor_ladder(1.0, 1.0, band)[1]]
    ratios = [r / ind / (2 * np.pi * corner) for r, ind in sections]
    np.testing.assert_allclose(ratios, np.array(base) / (2 * np.pi), rtol=1e-9)


@pytest.mark.parametrize("corner", [10.0, 2e4, 15e6, 1e9, 2e10])
def test_conductor_sections_far_above_a_long_grid_summed_in_series_as_section_by_section(
    corner,
):
    # On a long grid the sections whose corners lie far above it are summed as their
    # power series [derived, see bench.core.models.conductor]: the shape and its slope
    # in ln ωc agree with the plain sum over the R‖L sections (each jx/(1 + jx)) to
    # rounding.
    from bench.core.models.conductor import _conductor_parts, conductor_slope, conductor_terms

    band = (10.0, 2e10)
    f = np.geomspace(1e3, 2e8, 1601)
    w = 2 * np.pi * f
    g, rho, tail = _conductor_parts(band)
    wc = 2 * np.pi * corner
    jx = 1j * w[None, :] / (rho[:, None] * wc)
    exact = 1.0 + g @ (jx / (1.0 + jx)) + 1j * tail * w / wc
    slope = -(g @ (jx / (1.0 + jx) ** 2)) - 1j * tail * w / wc
    shape, terms = conductor_terms(1j * w, corner, band)
    # In use where enough sections lie 1000 times above the grid's top.
    assert (terms[-1] is not None) == (corner >= 2e4)
    np.testing.assert_allclose(shape, exact, rtol=1e-13)
    np.testing.assert_allclose(conductor_slope(terms), slope, rtol=1e-12, atol=1e-13)


def test_conductor_limits_at_dc_and_well_above_the_corner():
    # Check values (docs/references.md §17, [derived]): R at DC; well above the corner
    # (1 + j)·R·√(f/(2fc)): 2.5 mΩ with fc = 1 MHz at 100 MHz → (1 + j)·17.68 mΩ; the
    # low-frequency inductance R/(2ωc) = 0.1989 nH, exact in the ladder.
    band = (1.0, 1e10)
    values = {"R": 2.5e-3, "fcR": 1e6}
    z_dc, z_top = network_impedance(K("R", band), np.array([1e-3, 100e6]), values)
    assert z_dc.real == pytest.approx(2.5e-3, rel=1e-9)
    assert z_dc.imag / (2 * np.pi * 1e-3) == pytest.approx(0.19894e-9, rel=1e-4)
    # The continuous form differs from its asymptote by about 1/(2·f/fc) = 0.5 % here.
    assert z_top.real == pytest.approx(17.68e-3, rel=0.01)
    assert z_top.imag == pytest.approx(17.68e-3, rel=0.01)


@pytest.mark.parametrize("order", [1, 2])
def test_compiled_conductor_and_its_jacobian_match_the_tree_walk(order):
    # The fitter's compiled evaluation of lossy-rlc against the general tree walk, and
    # its Jacobian against central differences.
    f = np.logspace(2, np.log10(2e8), 121)
    node = lossy_rlc.network(order, (f[0], f[-1]))
    values = {"R": 4e-3, "fcR": 5e6, "S": 1e-3, "L": 0.4e-9, "C": 10e-6, "tanC": 0.05}
    values.update({"R2": 0.06, "L2": 2e-9, "C2": 30e-9})
    net = compiled(node, f)
    assert not net.general
    q = values_to_q(net.names, values)
    z, jac = net.impedance(q), net.jacobian(q)
    z_tree, jac_tree = impedance_and_jacobian(node, f, {n: values[n] for n in net.names})
    np.testing.assert_allclose(z, z_tree, rtol=1e-12)
    np.testing.assert_allclose(jac, jac_tree, rtol=1e-9, atol=1e-12 * np.abs(z).max())
    for i in range(len(q)):
        step = np.zeros_like(q)
        step[i] = 1e-5
        numeric = (net.impedance(q + step) - net.impedance(q - step)) / 2e-5
        np.testing.assert_allclose(numeric, jac[i], rtol=1e-4, atol=1e-8 * np.abs(z).max())


def test_long_grid_in_pieces_gives_each_point_its_own_value(monkeypatch):
    # A long grid is evaluated in pieces (memory); every point must come out as it does
    # on a grid of its own: the same ladders, pieces joined in order.
    from bench.core.models import network

    f = np.geomspace(1e2, 2e8, 1000)
    node = lossy_rlc.network(1, (f[0], f[-1]))
    values = {"R": 4e-3, "fcR": 5e6, "L": 0.4e-9, "C": 10e-6, "tanC": 0.05}
    monkeypatch.setattr(network, "CHUNK_POINTS", 64)
    pieces = network.network_impedance(node, f, values)
    alone = np.array(
        [network.network_impedance(node, f[i : i + 1], values)[0] for i in range(0, f.size, 37)]
    )
    np.testing.assert_allclose(pieces[::37], alone, rtol=1e-13)


@needs_ngspice
@pytest.mark.ngspice
@pytest.mark.parametrize("element", ["S", "Q", "K"])
def test_each_ladder_element_in_ngspice_matches_its_impedance(tmp_path, element):
    if element == "Q":
        node = series(R("R"), Ind("L"), Q("C", (10.0, 1e9)))
        values = {"R": 2e-3, "L": 0.5e-9, "C": 10e-6, "tanC": 0.05}
    elif element == "K":
        node = series(K("R", (10.0, 1e9)), Ind("L"))
        values = {"R": 2e-3, "fcR": 5e6, "L": 1e-9}
    else:
        node = series(R("R"), S("S", (10.0, 1e9)), Ind("L"))
        values = {"R": 2e-3, "S": 5e-3, "L": 1e-9}
    text = ".subckt EL 1 2\n" + "\n".join(spice_lines(node, values)) + "\n.ends EL\n"
    f, z_spice = run_ngspice(tmp_path, text, "EL", 100.0, 100e6)
    z_model = network_impedance(node, f, values)
    np.testing.assert_allclose(z_spice, z_model, rtol=2e-3)


def lossy_mlcc(f):
    """10 µF, constant tanδ = 0.05 (constant-phase form), √f conductor loss, weak mode."""
    w = 2 * np.pi * f
    n = (2 / np.pi) * np.arctan(0.05)
    zc = 1 / (1j * w * 10e-6 * (1j * w / (2 * np.pi * 1e3)) ** (-n))
    main = zc + 4e-3 * np.sqrt(1 + 1j * f / 5e6) + 1j * w * 0.4e-9
    mode = 0.06 + 1j * w * 2e-9 + 1 / (1j * w * 30e-9)
    return 1 / (1 / main + 1 / mode)


@needs_ngspice
@pytest.mark.ngspice
def test_exported_lossy_part_follows_the_true_part_in_ngspice(tmp_path):
    f = np.logspace(2, np.log10(2e8), 401)
    rng = np.random.default_rng(11)
    e = rng.standard_normal(f.size) + 1j * rng.standard_normal(f.size)
    z = lossy_mlcc(f) * (1 + 0.005 * e / np.sqrt(2))
    result = fit_impedance(f, z, rel_uncertainty=np.full(f.size, 0.005))
    text = subckt_text(result, "MCX10U", provenance={"source": "invented part"})
    fs, z_spice = run_ngspice(tmp_path, library_text([text], title="t"), "MCX10U", 100.0, 2e8)
    z_true = lossy_mlcc(fs)
    rms = np.sqrt(np.mean(np.abs(np.log(z_spice / z_true)) ** 2))
    assert rms <= 0.02
    # ESR across the band, from 100 Hz through the resonance (2.6 MHz) to 20 MHz.
    band = fs <= 20e6
    ratio = z_spice.real[band] / z_true.real[band]
    assert np.all(np.abs(ratio - 1) <= 0.2), (fs[band][np.argmax(np.abs(ratio - 1))], ratio)


@needs_ngspice
@pytest.mark.ngspice
def test_part_alone_and_on_its_mount_are_two_named_subcircuits(tmp_path):
    f = np.logspace(3, 8, 201)
    z = lossy_mlcc(f)
    result = fit_impedance(f, z, rel_uncertainty=np.full(f.size, 0.005))
    alone = subckt_text(result, "MCX", provenance={})
    mounted = on_mount_subckt_text(result, "MCX", 2e-3, 0.3e-9, provenance={})
    assert ".subckt MCX 1 2" in alone and "mount removed" in alone
    assert ".subckt MCX_on_mount 1 2" in mounted and "mount included" in mounted
    library = library_text([alone, mounted], title="both")
    fs, z_on = run_ngspice(tmp_path, library, spice_name("MCX_on_mount"), 1e3, 1e8)
    expected = result.impedance(fs) + 2e-3 + 2j * np.pi * fs * 0.3e-9
    np.testing.assert_allclose(z_on, expected, rtol=2e-3)
    with pytest.raises(ValueError, match=">= 0"):
        on_mount_subckt_text(result, "MCX", -1.0, 0.0, provenance={})
