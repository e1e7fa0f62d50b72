"""The run folder: manifest, atomic raw sweeps, rejected sweeps, resume bookkeeping."""

from __future__ import annotations

import json

import numpy as np
import pytest

from bench.errors import InputError
from bench.procedure.operators import ConsoleOperator, OperatorStop
from bench.procedure.plan import Placement
from bench.runstore import DONE, FAILED, PENDING, RUNNING, RunStore, file_stem


def _store(tmp_path):
    return RunStore.create(
        tmp_path / "runs",
        plan_name="p",
        resolved={"name": "p", "sweep": {"points": 3}},
        procedure_text="name: p\n",
        step_ids=[
            ("calibrate/through", "calibrate"),
            ("measure/A/s1/0V", "measure"),
            ("fit", "fit"),
        ],
    )


def _sweep():
    f = np.geomspace(1e3, 1e6, 12)
    s = np.zeros((12, 2, 2), dtype=complex)
    s[:, 1, 0] = np.linspace(0.1, 0.9, 12) * np.exp(-1j * np.linspace(0, 1, 12))
    s[:, 0, 1] = s[:, 1, 0]
    s[:, 0, 0] = s[:, 1, 1] = s[:, 1, 0] - 1
    return f, s


def test_layout_and_manifest(tmp_path):
    store = _store(tmp_path)
    for sub in ("raw", "corrected", "models", "plots"):
        assert (store.root / sub).is_dir()
    manifest = json.loads((store.root / "manifest.json").read_text())
    assert manifest["software_version"]
    assert [s["state"] for s in manifest["steps"]] == [PENDING] * 3
    assert (store.root / "procedure.yaml").read_text() == "name: p\n"
    assert store.first_incomplete() == "calibrate/through"


def test_raw_sweep_round_trip_and_resume_point(tmp_path):
    store = _store(tmp_path)
    f, s = _sweep()
    store.mark("calibrate/through", RUNNING)
    store.write_raw("calibrate/through", "cal_through", f, s)
    store.mark("calibrate/through", DONE)
    again = RunStore.open(store.root)
    assert again.step_files("calibrate/through") == ["raw/cal_through.s2p"]
    f2, s2 = again.read_raw("raw/cal_through.s2p")
    np.testing.assert_allclose(f2, f)
    np.testing.assert_allclose(s2, s, atol=1e-12)
    assert again.first_incomplete() == "measure/A/s1/0V"
    assert "finished" in again.step_info("calibrate/through")


def test_unlisted_sweep_is_adopted_after_a_crash(tmp_path):
    store = _store(tmp_path)
    f, s = _sweep()
    store.write_raw("measure/A/s1/0V", "A_s1_0V", f, s, save=False)  # crash before a save
    again = RunStore.open(store.root)
    assert again.step_files("measure/A/s1/0V") == []
    assert again.adopt_raw("measure/A/s1/0V", "A_s1_0V")
    assert RunStore.open(store.root).step_files("measure/A/s1/0V") == ["raw/A_s1_0V.s2p"]
    assert not again.adopt_raw("measure/A/s1/0V", "missing")


def test_rejected_sweeps_are_kept(tmp_path):
    store = _store(tmp_path)
    f, s = _sweep()
    for _ in range(2):
        store.write_raw("measure/A/s1/0V", "A_s1_0V", f, s)
        store.reject_raw("measure/A/s1/0V", "A_s1_0V")
    names = sorted(p.name for p in (store.root / "raw" / "rejected").iterdir())
    assert names == ["A_s1_0V.1.s2p", "A_s1_0V.2.s2p"]
    assert store.step_files("measure/A/s1/0V") == []
    assert len(store.step_info("measure/A/s1/0V")["rejected"]) == 2


def test_failed_step_is_where_resume_starts(tmp_path):
    store = _store(tmp_path)
    store.mark("calibrate/through", DONE)
    store.mark("measure/A/s1/0V", FAILED, message="instrument: lost")
    assert RunStore.open(store.root).first_incomplete() == "measure/A/s1/0V"


def test_open_rejects_what_is_not_a_run(tmp_path):
    with pytest.raises(InputError, match="not a run folder"):
        RunStore.open(tmp_path)
    (tmp_path / "manifest.json").write_text("{not json")
    with pytest.raises(InputError, match="not valid JSON"):
        RunStore.open(tmp_path)


def test_file_stems():
    assert file_stem("measure/MC22-6V3/s1/2.5V") == "MC22-6V3_s1_2.5V"
    assert file_stem("calibrate/short") == "cal_short"
    assert file_stem("mount_short/p3") == "short_p3"
    assert file_stem("mount_open/p2") == "open_p2"


def test_console_operator_reads_answers():
    answers = iter(["", "x", "r", "s", "q", "yes", "no", "stop"])
    said: list[str] = []
    person = ConsoleOperator(guided=True, ask=lambda prompt: next(answers), say=said.append)
    person.fit_resistors(0)
    person.fit_transformer(True)
    assert not said, "set-up actions wait for the next prompt"
    person.connect_standard("through")  # Enter: done
    assert "THROUGH" in said[-1] and "isolation transformer" in said[-1]
    assert said[-1].startswith("Before the run:")
    assert person.after_sweep("A/s1", "ok") == "repeat"  # 'x' is refused, then 'r'
    assert any("not one of the choices" in s for s in said)
    assert person.after_sweep("A/s1", "ok") == "skip"
    assert person.after_sweep("A/s1", "ok") == "stop"
    person.caution("DC bias")  # yes
    with pytest.raises(OperatorStop):
        person.caution("DC bias")  # no
    with pytest.raises(OperatorStop):
        person.load_parts([Placement("A", "s1", 1, 0)])  # stop
    assert "position 1: A sample s1" in said[-1]
