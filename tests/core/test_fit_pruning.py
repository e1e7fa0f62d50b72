"""Candidates the criterion cannot choose are not fitted, and the choice stays the same.

``auto`` leaves out a candidate whose penalty ``k·ln m`` alone is at or above the
criterion of the choice so far (``bench.core.fitting.cannot_win``). That must never
change what is chosen: here every part is fitted with and without the pruning, on the
invented parts of ``test_fitting`` measured shunt-through with seeded noise, and at
least one larger candidate must be left out, or the check would hold trivially.
"""

from __future__ import annotations

import numpy as np
import pytest

from bench.core import fitting
from bench.core.conversions import shunt_through_s21
from bench.core.fitting import fit_impedance
from bench.core.impedance import impedance_from_shunt_through
from simulated_instruments.parts import BulkCapacitor, FerriteBead, Mlcc, PowerInductor

F = np.logspace(3, np.log10(200e6), 301)
PARTS = {
    "mlcc": (Mlcc(name="MC10U", capacitance=10e-6, esl=0.45e-9, esr=4e-3), 0.0),
    "bulk": (BulkCapacitor(name="PB330", capacitance=330e-6, line_resistance=30e-3), 0.0),
    "inductor": (PowerInductor(name="PL1U", inductance=1e-6, r_dc=8e-3), 450.0),
    "bead": (FerriteBead(name="FB600", inductance2=0.4e-6, resistance2=120.0), 450.0),
}


def fitted(part, series_r: float, seed: int):
    """Shunt-through S21 with 0.01 dB trace noise and a -120 dB floor, fitted by auto."""
    rng = np.random.default_rng(seed)
    s21 = shunt_through_s21(part.impedance(F), 50.0, series_r)
    noise = (rng.normal(size=F.size) + 1j * rng.normal(size=F.size)) / np.sqrt(2)
    floor = (rng.normal(size=F.size) + 1j * rng.normal(size=F.size)) / np.sqrt(2)
    s21 = s21 * (1 + (10 ** (0.01 / 20) - 1) * noise) + 1e-6 * floor
    data = impedance_from_shunt_through(
        F, s21, series_r=series_r, noise_floor_db=-120.0, trace_noise_db=0.01
    )
    return fit_impedance(
        data.f, data.z, rel_uncertainty=data.rel_uncertainty, valid=data.inside_window
    )


@pytest.mark.parametrize("name", sorted(PARTS))
def test_pruning_never_changes_the_choice(name, monkeypatch):
    part, series_r = PARTS[name]
    pruned = [fitted(part, series_r, seed) for seed in (1, 2)]
    monkeypatch.setattr(fitting, "cannot_win", lambda *args, **kwargs: False)
    every = [fitted(part, series_r, seed) for seed in (1, 2)]
    for a, b in zip(pruned, every, strict=True):
        assert (a.model, a.order) == (b.model, b.order)
        assert {(c.model, c.order) for c in a.candidates} <= {
            (c.model, c.order) for c in b.candidates
        }
        # The chosen fit may start from a lower order's restart that a left-out
        # candidate would have given, so its landmarks agree closely, not bit for bit.
        for key, value in b.landmarks.items():
            if value is not None:
                assert a.landmarks[key] == pytest.approx(value, rel=0.01), key


def test_some_candidate_is_left_out(monkeypatch):
    left_out = 0
    for part, series_r in PARTS.values():
        pruned = fitted(part, series_r, 1)
        with monkeypatch.context() as m:
            m.setattr(fitting, "cannot_win", lambda *args, **kwargs: False)
            every = fitted(part, series_r, 1)
        left_out += len(every.candidates) - len(pruned.candidates)
    assert left_out > 0
