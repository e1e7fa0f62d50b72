"""Work the fit leaves out, and that it must never change what is chosen.

Four shortcuts of ``bench.core.fitting`` are checked here against the fit without them,
on the invented parts of ``test_fit_pruning`` (shunt-through with seeded noise), plus an
inductor with core loss and a winding capacitance, whose R-L sections stop paying
gradually:

- the order climb ends at an order that lowers the criterion by less than the
  selection's margin (``CLIMB_MARGIN``, the margin ``lowest_bic`` asks of a larger
  candidate);
- a family's climb ends when its fit leaves ``HOPELESS_FACTOR`` times the χ² another
  fit reaches with no more elements than the family's next order;
- a scout ends after ``SCOUT_EVALUATIONS`` model evaluations per element and one more,
  and the refinement on every point goes on from where it stopped;
- a scout stops where its model comes within a tenth of each point's uncertainty of an
  earlier scout's end at the same cost (``fit_solve.SAME_VALLEY_RESIDUAL``): the same
  circuit with its like sections in another order, or with an element the data do not
  see elsewhere.

Each shortcut must be seen to act (something left out), or the check would hold
trivially.
"""

from __future__ import annotations

import numpy as np
import pytest

from bench.core import fit_solve, fitting
from bench.core.fit_solve import SameValleyError, same_valley_watch
from bench.core.fitting import fit_impedance
from simulated_instruments.parts import PowerInductor
from tests.core.test_fit_pruning import PARTS, fitted

CASES = {
    **PARTS,
    "lossy inductor": (
        PowerInductor(
            name="PL1U",
            inductance=1e-6,
            r_dc=8e-3,
            core_loss_resistance=150.0,
            winding_capacitance=10e-12,
        ),
        450.0,
    ),
}


def same_choice(a, b) -> None:
    assert (a.model, a.order) == (b.model, b.order)
    assert a.quality.rms_log_error == pytest.approx(b.quality.rms_log_error, rel=1e-3)
    for key, value in b.landmarks.items():
        if value is not None:
            assert a.landmarks[key] == pytest.approx(value, rel=0.01), key


def with_and_without(name, monkeypatch, setting: str, off: float):
    """The fit of ``CASES[name]`` with the shortcut ``fitting.<setting>``, and without it
    (``setting`` at ``off``); the candidates of the first are among the second's."""
    part, series_r = CASES[name]
    shortened = fitted(part, series_r, 1)
    monkeypatch.setattr(fitting, setting, off)
    full = fitted(part, series_r, 1)
    assert {(c.model, c.order) for c in shortened.candidates} <= {
        (c.model, c.order) for c in full.candidates
    }
    return shortened, full


@pytest.mark.parametrize("name", sorted(CASES))
def test_climb_margin_never_changes_the_choice(name, monkeypatch):
    # Without the margin: every order while it pays.
    same_choice(*with_and_without(name, monkeypatch, "CLIMB_MARGIN", -np.inf))


def test_climb_margin_leaves_an_order_out(monkeypatch):
    part, series_r = CASES["lossy inductor"]
    shortened = fitted(part, series_r, 1)
    monkeypatch.setattr(fitting, "CLIMB_MARGIN", -np.inf)
    full = fitted(part, series_r, 1)
    assert len(full.candidates) > len(shortened.candidates)


@pytest.mark.parametrize("name", sorted(CASES))
def test_hopeless_family_never_changes_the_choice(name, monkeypatch):
    # Without the factor: every family climbs on.
    same_choice(*with_and_without(name, monkeypatch, "HOPELESS_FACTOR", np.inf))


def test_hopeless_family_leaves_orders_out(monkeypatch):
    # The bead family on a wound inductor with skin-effect sections: its first order
    # leaves far more than the inductor's fit with as many elements as its second would
    # have, so the higher orders are not fitted.
    shortened, full = with_and_without("lossy inductor", monkeypatch, "HOPELESS_FACTOR", np.inf)
    left_out = {(c.model, c.order) for c in full.candidates} - {
        (c.model, c.order) for c in shortened.candidates
    }
    assert left_out and {model for model, _ in left_out} == {"bead"}


def analyser_bulk_capacitor():
    """An invented 330 µF polymer capacitor on a low-frequency impedance analyser,
    10 Hz to 1 MHz, 201 points: conductor loss rising as √f above 1 MHz, a loss tangent
    of 0.05, 2 nH, the analyser's gain 3 % high and 0.3 % noise on every point."""
    rng = np.random.default_rng(8)
    f = np.geomspace(10.0, 1e6, 201)
    w = 2 * np.pi * f
    z = 8e-3 * (1 + np.sqrt(f / 1e6)) + 1 / (1j * w * 330e-6 * (1 - 0.05j)) + 1j * w * 2e-9
    z = 1.03 * z * (1 + 3e-3 * (rng.normal(size=f.size) + 1j * rng.normal(size=f.size)))
    return fit_impedance(f, z, rel_uncertainty=np.full(f.size, 3e-3))


def test_scout_budget_never_changes_the_choice(monkeypatch):
    reached = []
    lm = fit_solve.levenberg_marquardt

    def counted(fun, jac, x0, max_nfev, tolerance):
        calls = []

        def fun_counted(q):
            calls.append(1)
            return fun(q)

        out = lm(fun_counted, jac, x0, max_nfev, tolerance)
        if len(calls) >= max_nfev and tolerance == fitting.SCOUT_TOLERANCE:
            reached.append(max_nfev)
        return out

    monkeypatch.setattr(fit_solve, "levenberg_marquardt", counted)
    budgeted = analyser_bulk_capacitor()
    assert reached  # a scout here ends at its budget, so the check is not trivial
    monkeypatch.setattr(fitting, "SCOUT_EVALUATIONS", 1000)
    reached.clear()
    unbounded = analyser_bulk_capacitor()
    assert not reached
    same_choice(budgeted, unbounded)
    for name, value in unbounded.elements.items():
        assert budgeted.elements[name] == pytest.approx(value, rel=1e-3), name


class CountingWatch:
    """``same_valley_watch`` counting the scouts it stops."""

    def __init__(self) -> None:
        self.stopped = 0

    def __call__(self, ends):
        watch = same_valley_watch(ends)
        if watch is None:
            return None

        def counted(q, r):
            try:
                watch(q, r)
            except SameValleyError:
                self.stopped += 1
                raise

        return counted


@pytest.mark.parametrize("name", sorted(CASES))
def test_same_valley_by_residuals_never_changes_the_choice(name, monkeypatch):
    part, series_r = CASES[name]
    by_model = fitted(part, series_r, 2)
    monkeypatch.setattr(fit_solve, "SAME_VALLEY_RESIDUAL", 0.0)  # by the values alone
    by_values = fitted(part, series_r, 2)
    same_choice(by_model, by_values)


def test_same_valley_by_residuals_stops_more_scouts(monkeypatch):
    counts = []
    for residual in (fit_solve.SAME_VALLEY_RESIDUAL, 0.0):
        watch = CountingWatch()
        with monkeypatch.context() as m:
            m.setattr(fit_solve, "SAME_VALLEY_RESIDUAL", residual)
            m.setattr(fitting, "same_valley_watch", watch)
            for part, series_r in CASES.values():
                fitted(part, series_r, 2)
        counts.append(watch.stopped)
    assert counts[0] > counts[1]


def test_watch_takes_like_sections_in_another_order_as_the_same_valley():
    # Two end points of one circuit with its two sections swapped: far apart in values,
    # identical in the model, so their residuals are too.
    r_end = np.array([0.3, -0.2, 0.1, 0.05])
    end = (float(r_end @ r_end), np.log([1.0, 2.0, 3.0, 4.0]), r_end)
    watch = same_valley_watch([end])
    swapped = np.log([3.0, 4.0, 1.0, 2.0])
    with pytest.raises(SameValleyError) as stop:
        watch(swapped, r_end * 1.004)  # cost 0.8 % up, every residual within 0.002
    assert stop.value.end is end
    # The same cost with one residual 0.2 away (over a tenth of an uncertainty): another
    # model, the scout goes on.
    watch(swapped, r_end * np.array([1.0, 1.0, -1.0, 1.0]))
    # Values alone: an end given without residuals is only met at its values.
    by_values = same_valley_watch([end[:2]])
    by_values(swapped, r_end)
    with pytest.raises(SameValleyError):
        by_values(end[1] + 0.01, r_end)
