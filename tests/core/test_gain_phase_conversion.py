"""The gain-phase analyser's receiver ratio to impedance, against scikit-rf's network
algebra: a series reference resistor then the part (with the receiver's input impedance)
in shunt, left open at the far end; the ratio of the far voltage to the near one is
1/A of the two-port's ABCD matrix (open output: I2 = 0, so V1 = A·V2)."""

from __future__ import annotations

import numpy as np
import pytest
import skrf
from skrf.media import DefinedGammaZ0

from bench.core.conversions import gain_phase_ratio, gain_phase_z

F = np.geomspace(10.0, 30e6, 61)


def bulk_capacitor(f):
    """An invented 330 µF bulk part: 8 mΩ ESR, 1.1 nH ESL."""
    w = 2j * np.pi * f
    return 8e-3 + w * 1.1e-9 + 1 / (w * 330e-6)


def skrf_ratio(z_part, r_ref, z_in):
    # Source: scikit-rf network algebra (Network ** cascade, Network.a = ABCD). The shunt
    # element is the part in parallel with receiver B's input impedance.
    media = DefinedGammaZ0(skrf.Frequency.from_f(F, unit="hz"), z0=50)
    zp = z_part if z_in is None else z_part * z_in / (z_part + z_in)
    shunt = media.shunt(media.load((zp - 50) / (zp + 50)))
    chain = media.resistor(r_ref) ** shunt
    return 1.0 / chain.a[:, 0, 0]


@pytest.mark.parametrize("r_ref", [1.0, 10.0])
@pytest.mark.parametrize("with_input", [False, True])
def test_ratio_and_impedance_against_scikit_rf(r_ref, with_input):
    z = bulk_capacitor(F)
    z_in = 1 / (1 / 1e6 + 2j * np.pi * F * 30e-12) if with_input else None
    h = skrf_ratio(z, r_ref, z_in)
    np.testing.assert_allclose(gain_phase_ratio(z, r_ref=r_ref, z_in=z_in), h, rtol=1e-9)
    np.testing.assert_allclose(gain_phase_z(h, r_ref=r_ref, z_in=z_in), z, rtol=1e-7)


def test_divider_by_hand():
    # A 1 Ω part behind a 1 Ω reference halves the voltage [derived: 1/(1 + 1)].
    assert gain_phase_ratio(1.0, r_ref=1.0) == pytest.approx(0.5)
    assert gain_phase_z(0.5, r_ref=1.0) == pytest.approx(1.0)


def test_bad_reference_is_refused():
    with pytest.raises(ValueError, match="r_ref"):
        gain_phase_z(0.5, r_ref=0.0)


def test_impedance_data_from_the_ratio():
    from bench.core.gain_phase import impedance_from_gain_phase

    z = bulk_capacitor(F)
    z_in = 1 / (1 / 1e6 + 2j * np.pi * F * 30e-12)
    data = impedance_from_gain_phase(F, gain_phase_ratio(z, r_ref=1.0, z_in=z_in), r_ref=1.0,
                                     z_in=z_in)  # fmt: skip
    np.testing.assert_allclose(data.z, z, rtol=1e-7)
    # The divider is a shunt-through of Ze = 2·r_ref: the uncertainty grows where |Z| is
    # far above the reference (the ratio near 1), here the lowest frequencies.
    low_f = data.rel_uncertainty[F < 20]
    mid = data.rel_uncertainty[(F > 1e3) & (F < 1e6)]
    assert low_f.max() > mid.max()
    assert data.inside_window[(F > 1e3) & (F < 1e6)].all()
