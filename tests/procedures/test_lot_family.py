"""One model family per lot: after each sample's own ``auto`` fit, the samples whose
family differs from the lot's are refitted with it; verdicts and the landmarks read
from the data stay as they were."""

from __future__ import annotations

import numpy as np

from bench import exports
from bench.core.impedance import impedance_as_given
from bench.procedure.lot_family import family_record, one_family_per_lot
from bench.procedure.processing import fit_task
from bench.results import PartSpec, RunSummary, SampleResult
from bench.verdicts import landmark_sources, shown_landmarks

F = np.geomspace(1e3, 1e8, 81)
W = 2 * np.pi * F
SPEC = PartSpec(name="ZBEX-C10U", kind="mlcc", nominal=10e-6, tolerance=0.2)


def _rlc(c, esl, r):
    return r + 1j * W * esl + 1 / (1j * W * c)


def _two(a, b):
    return a * b / (a + b)


# Invented truths: a 10 µF capacitor alone, and with a small second branch (two values),
# so that each sample's own `auto` fit picks series-rlc or two-branch.
TRUTHS = {
    "s1": _two(_rlc(10e-6, 2e-9, 5e-3), _rlc(0.1e-6, 0.3e-9, 0.05)),
    "s2": _two(_rlc(10e-6, 2e-9, 5e-3), _rlc(0.3e-6, 0.5e-9, 0.02)),
    "s3": _rlc(10e-6, 1e-9, 5e-3),
}


def _lot():
    rng = np.random.default_rng(3)
    samples, tasks = [], []
    for name, z in TRUTHS.items():
        noisy = z * (1 + 0.003 * (rng.standard_normal(F.size) + 1j * rng.standard_normal(F.size)))
        data = impedance_as_given(F, noisy, rel_uncertainty=np.full(F.size, 0.003))
        task = ("auto", data, 0.0)
        fit, error = fit_task(task)
        assert error is None
        samples.append(SampleResult(part=SPEC.name, sample=name, data=data, fit=fit))
        tasks.append(task)
    return samples, tasks


def test_a_mixed_lot_is_refitted_to_its_majority_family():
    samples, tasks = _lot()
    own = [s.fit.model for s in samples]
    assert own == ["two-branch", "two-branch", "series-rlc"], own  # the mixed lot
    out = one_family_per_lot(samples, tasks, lambda jobs: map(fit_task, jobs))
    assert [s.fit.model for s in out] == ["two-branch"] * 3
    # The majority's own fits are kept as they were; the other is refitted.
    assert out[0] is samples[0] and out[1] is samples[1]
    refitted = out[2]
    assert refitted.own_family == "series-rlc"
    # The sample's own fit (criterion, quality) gave way; the refit still meets the bound.
    assert refitted.fit.meets_quality
    assert any("set by the lot" in w and "series-rlc" in w for w in refitted.warnings)
    assert family_record(refitted) == {"family": {"set_by": "lot", "own_choice": "series-rlc"}}
    assert family_record(out[0])["family"]["set_by"] == "sample"
    # Verdicts and the landmarks read from the data do not move.
    before = exports.summary_rows(RunSummary("r", "p", (SPEC,), tuple(samples)))
    after = exports.summary_rows(RunSummary("r", "p", (SPEC,), tuple(out)))
    for b, a in zip(before, after, strict=True):
        assert (a["result"], a["reason"], a["measured"]) == (
            b["result"],
            b["reason"],
            b["measured"],
        )
    sources = landmark_sources(samples[2], "capacitor")
    old, new = shown_landmarks(samples[2], "capacitor"), shown_landmarks(refitted, "capacitor")
    data_keys = [k for k, src in sources.items() if src == "data"]
    assert data_keys and all(old[k] == new[k] for k in data_keys)


def test_a_tie_goes_to_the_lower_summed_criterion():
    samples, tasks = _lot()
    # One two-branch and one series-rlc sample: each is refitted with the other's family;
    # series-rlc cannot follow the second branch, so its summed criterion is far higher.
    pair, pair_tasks = [samples[0], samples[2]], [tasks[0], tasks[2]]
    out = one_family_per_lot(pair, pair_tasks, lambda jobs: map(fit_task, jobs))
    assert [s.fit.model for s in out] == ["two-branch", "two-branch"]
    assert out[0] is pair[0] and out[1].own_family == "series-rlc"
    assert any("a tie (" in w and "summed criterion" in w for w in out[1].warnings)
    # A lot already of one family is left alone, and nothing is refitted.
    assert one_family_per_lot(samples[:2], tasks[:2], _never) == samples[:2]


def _never(jobs):
    raise AssertionError(f"refitted {list(jobs)} in a lot of one family")
