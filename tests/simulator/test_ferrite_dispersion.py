"""The invented bead's dispersive ferrite: a Cole-Cole permeability on its core."""

from __future__ import annotations

import numpy as np
import pytest

from simulated_instruments.parts import FerriteBead, PartError


def test_debye_relaxation_has_equal_real_and_loss_parts_at_its_frequency():
    # α = 0 is a single Debye relaxation, μ = 1/(1 + j f/fr): at f = fr, μ' = μ'' = 1/2
    # and μ'' peaks there (Debye relaxation, as in any dielectric or magnetic handbook;
    # from memory).
    bead = FerriteBead(relaxation_frequency=30e6, cole_alpha=0.0)
    f = np.geomspace(1e6, 1e9, 301)
    mu = bead.permeability(f)
    at = bead.permeability(np.array([30e6]))[0]
    assert at.real == pytest.approx(0.5) and -at.imag == pytest.approx(0.5)
    assert f[np.argmax(-mu.imag)] == pytest.approx(30e6, rel=0.03)


def test_cole_alpha_spreads_the_loss_over_more_decades():
    f = np.geomspace(1e5, 1e10, 501)
    narrow = -FerriteBead(relaxation_frequency=30e6).permeability(f).imag
    wide = -FerriteBead(relaxation_frequency=30e6, cole_alpha=0.4).permeability(f).imag

    def decades_above_half(loss):
        band = f[loss >= loss.max() / 2]
        return np.log10(band[-1] / band[0])

    assert decades_above_half(wide) > decades_above_half(narrow) + 0.5


def test_dispersive_core_turns_resistive_above_relaxation():
    bead = FerriteBead(
        inductance=1e-6, resistance=1e6, capacitance=1e-15, relaxation_frequency=10e6
    )
    z = bead.impedance(np.array([100e3, 1e9]))
    assert z[0].imag > 5 * z[0].real  # far below fr: an inductor (and its 40 mΩ)
    assert z[1].real > z[1].imag  # far above: mostly loss


def test_cole_alpha_out_of_range_is_refused():
    with pytest.raises(PartError, match="cole_alpha"):
        FerriteBead(relaxation_frequency=1e7, cole_alpha=1.0)
