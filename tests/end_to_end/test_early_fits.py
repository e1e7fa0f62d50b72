"""Samples fitted during the sweeps (bench/procedure/early_fit.py): the fit step takes an
early fit only where it fitted the very task the fit step builds, so the results are
those of fitting everything at the end; a stopped run leaves no early fit behind."""

from __future__ import annotations

from concurrent.futures import Future
from dataclasses import replace

import numpy as np
import pytest

from bench.core.impedance import impedance_as_given
from bench.errors import RunError
from bench.procedure.early_fit import EarlyFits, task_digest
from bench.procedure.operators import STOP, ScriptedOperator
from bench.procedure.processing import build_summary


def _task(scale: float = 1.0) -> tuple[str, object, float]:
    """A fit task of an invented 10 µF, 5 mΩ, 0.5 nH capacitor read with 0.5 % noise."""
    f = np.geomspace(100, 1e8, 101)
    w = 2 * np.pi * f
    rng = np.random.default_rng(3)
    z = (5e-3 + 1j * w * 0.5e-9 + 1 / (1j * w * 10e-6 * scale)) * (
        1 + 0.005 * rng.standard_normal(f.size)
    )
    return "auto", impedance_as_given(f, z, rel_uncertainty=np.full(f.size, 0.007)), 0.0


def _done(value=None, error: Exception | None = None) -> Future:
    future: Future = Future()
    if error is not None:
        future.set_exception(error)
    else:
        future.set_result(value)
    return future


def test_an_early_fit_is_taken_only_for_the_very_task_and_a_failed_one_is_redone():
    tasks = [_task(1.0), _task(2.0), _task(3.0)]
    keys = [("measure/a",), ("measure/b",), ("measure/c",)]
    early = EarlyFits(root=".", plan=None, workers=2)  # type: ignore[arg-type]
    marker = (object(), None)
    # a: fitted early on this task; b: fitted early on other input (a capture redone
    # since); c: its worker failed.
    early._futures = {
        keys[0]: _done((task_digest(tasks[0]), marker)),
        keys[1]: _done((task_digest(tasks[2]), marker)),
        keys[2]: _done(error=RuntimeError("worker lost")),
    }
    results = early.fits(keys, tasks, jobs=1)
    assert results[0] is marker
    assert early.taken == 1
    for (result, error), task in zip(results[1:], tasks[1:], strict=True):
        assert error is None and result is not None and result is not marker[0]
        # Fitted on its own data: 20 µF and 30 µF.
        c = result.landmarks["c_low"]
        assert c == pytest.approx(10e-6 * (2.0 if task is tasks[1] else 3.0), rel=0.05)
    assert early._futures == {}, "the workers are let go after the fit step"


def test_the_digest_follows_every_input_of_a_fit():
    model, data, valid_above = _task()
    base = task_digest((model, data, valid_above))
    assert task_digest(_task()) == base
    assert task_digest(("series-rlc", data, valid_above)) != base
    assert task_digest((model, data, 1e3)) != base
    inside = np.asarray(data.inside_window).copy()
    inside[0] = not inside[0]
    assert task_digest((model, replace(data, inside_window=inside), valid_above)) != base


def test_a_run_fits_each_sample_during_the_sweeps_as_the_fit_step_would(
    tmp_path, sim, kit, monkeypatch
):
    submitted: list[tuple[str, ...]] = []
    taken: list[int] = []
    submit, fits = EarlyFits.submit, EarlyFits.fits

    def spy_submit(self, steps):
        submitted.append(tuple(s.id for s in steps))
        return submit(self, steps)

    def spy_fits(self, keys, tasks, jobs=None):
        out = fits(self, keys, tasks, jobs)
        taken.append(self.taken)
        return out

    monkeypatch.setattr(EarlyFits, "submit", spy_submit)
    monkeypatch.setattr(EarlyFits, "fits", spy_fits)
    plan, store = kit.start_run(tmp_path, kit.SMALL)
    runner = kit.run_on(sim, plan, store)
    summary = runner.summary
    assert summary is not None
    # Each sample handed out as soon as its sweep was stored, and its early fit taken.
    assert len(submitted) == len(summary.samples) == 3
    assert taken == [3]
    # The same fits as the fit step makes without them, in sample order.
    again = build_summary(store, plan, jobs=1)
    assert [(s.part, s.sample) for s in summary.samples] == [
        (s.part, s.sample) for s in again.samples
    ]
    for early, late in zip(summary.samples, again.samples, strict=True):
        assert early.fit is not None and late.fit is not None
        assert early.fit.model == late.fit.model
        assert early.fit.elements == late.fit.elements
        assert early.fit.uncertainties == late.fit.uncertainties
        assert early.fit.quality == late.fit.quality


def test_a_run_stopped_after_an_early_fit_keeps_its_sweeps_and_no_worker(
    tmp_path, sim, kit, monkeypatch
):
    text = kit.SMALL.replace("mode: unattended", "mode: guided")
    plan, store = kit.start_run(tmp_path, text)
    # The through, the three mount shorts and the first sample accepted (it is handed
    # out early), then stopped at the second sample.
    answers = ["continue"] * 5 + [STOP]
    handed: list[EarlyFits] = []
    stopped: list[bool] = []
    submit, cancel = EarlyFits.submit, EarlyFits.cancel

    def spy_submit(self, steps):
        handed.append(self)
        return submit(self, steps)

    def spy_cancel(self):
        cancel(self)
        stopped.append(self._pool is None and not self._futures)

    monkeypatch.setattr(EarlyFits, "submit", spy_submit)
    monkeypatch.setattr(EarlyFits, "cancel", spy_cancel)

    def hands(bench):
        return ScriptedOperator(bench, guided=True, decisions=answers)

    with pytest.raises(RunError, match="zbench run --resume"):
        kit.run_on(sim, plan, store, operator=hands)
    _, again = kit.reopen(store)
    assert again.manifest["state"] == "stopped"
    assert again.step_state("measure/MC22-6V3/s1/0V") == "done"
    assert (store.root / "raw" / "MC22-6V3_s1_0V.s2p").is_file()
    assert len(handed) == 1, "the first sample went to the workers"
    assert stopped == [True], "the stop let the workers go"
    assert not (store.root / "models").exists() or not any((store.root / "models").iterdir())
