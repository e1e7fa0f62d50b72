"""A fixture removed with more inductance than it adds leaves a negative inductance in the
part: a capacitor's reactance at the top of the sweep then falls faster than a
capacitance's, which ``bench.core.landmarks.negative_inductance_above`` finds and the fit
reports (a mount short whose strap is longer than the part is the usual cause).

The check values are the series R-L-C reactance ``X = ωL − 1/(ωC)`` (handbook formula,
docs/references.md §3) and the shorted-mount removal ``Zdut = Zm − Zshort``
(docs/references.md §4) on invented parts and mounts; a capacitor whose capacitance falls
with frequency (a constant loss tangent, docs/references.md §16) must give nothing.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner

from bench.cli import cli
from bench.core.fitting import fit_impedance
from bench.core.landmarks import negative_inductance_above
from bench.touchstone import write_touchstone_z

NOISE = 3e-3
F = np.geomspace(1e3, 3e8, 501)


def noisy(z, seed: int = 5):
    rng = np.random.default_rng(seed)
    return z * (1 + NOISE * (rng.normal(size=z.size) + 1j * rng.normal(size=z.size)))


def mlcc(f, esl=0.35e-9):
    """An invented 4.7 µF MLCC, 2 mΩ, ``esl`` (series resonance 3.93 MHz at 0.35 nH)."""
    w = 2 * np.pi * f
    return 2e-3 + 1j * w * esl + 1 / (1j * w * 4.7e-6)


def on_mount_less_short(f, strap_l):
    """The MLCC measured on a mount of 0.2 mΩ + 150 pH, less a shorted-mount capture
    whose strap adds ``strap_l`` to the mount's own inductance."""
    w = 2 * np.pi * f
    mount = 0.2e-3 + 1j * w * 150e-12
    return (mlcc(f) + mount) - (mount + 1j * w * strap_l)


@pytest.mark.parametrize("strap_l", [0.4e-9, 0.6e-9])
def test_a_strap_longer_than_the_part_leaves_a_negative_inductance(strap_l):
    z = noisy(on_mount_less_short(F, strap_l))
    found = negative_inductance_above(F, z, np.full(F.size, NOISE))
    # X = ω(0.35 nH − strap) − 1/(ωC) (docs/references.md §3, §4): −50 pH and −250 pH.
    assert found == pytest.approx(0.35e-9 - strap_l, rel=0.05)


@pytest.mark.parametrize("strap_l", [0.0, 0.2e-9, 0.34e-9])
def test_a_mount_removed_within_the_parts_own_inductance_shows_none(strap_l):
    for seed in range(4):
        z = noisy(on_mount_less_short(F, strap_l), seed)
        assert negative_inductance_above(F, z, np.full(F.size, NOISE)) is None


def constant_loss_capacitor(f, inductance):
    """An invented 100 pF capacitor with a constant loss tangent of 0.03 (its capacitance
    falls 4.3 % a decade, docs/references.md §16), 50 mΩ, ``inductance`` in series."""
    w = 2 * np.pi * f
    n = (2 / np.pi) * np.arctan(0.03)
    return (
        1 / (1j * w * 100e-12 * (1j * w / (2 * np.pi * 1e6)) ** (-n)) + 0.05 + 1j * w * inductance
    )


def test_a_capacitance_falling_with_frequency_is_no_negative_inductance():
    f = np.geomspace(1e5, 1e9, 401)
    for inductance in (0.0, 30e-12):  # capacitive to the top of the sweep either way
        for seed in range(4):
            z = noisy(constant_loss_capacitor(f, inductance), seed)
            assert negative_inductance_above(f, z, np.full(f.size, NOISE)) is None
    z = noisy(constant_loss_capacitor(f, -30e-12))
    assert negative_inductance_above(f, z, np.full(f.size, NOISE)) == pytest.approx(
        -30e-12, rel=0.1
    )


def test_the_fit_and_the_command_say_the_fixture_was_over_removed(tmp_path: Path):
    z = noisy(on_mount_less_short(F, 0.4e-9))
    result = fit_impedance(F, z, rel_uncertainty=np.full(F.size, NOISE))
    notes = [w for w in result.warnings if w.startswith("fixture over-removed")]
    assert len(notes) == 1 and "-50 pH" in notes[0] and "mount short" in notes[0]
    path = write_touchstone_z(tmp_path / "over_removed.s1p", F, z)
    run = CliRunner().invoke(cli, ["fit", str(path)])
    assert "fixture over-removed" in run.output and "-50 pH" in run.output
    # The same part with the mount removed as it should be: nothing said.
    right = fit_impedance(
        F, noisy(on_mount_less_short(F, 0.0)), rel_uncertainty=np.full(F.size, NOISE)
    )
    assert not [w for w in right.warnings if "over-removed" in w]
