"""One model family per lot.

``auto`` chooses a family for each sample on its own, so two samples of one part may come
out in different families (one two-branch, one ladder) although they are the same
circuit. After the per-sample fits, each part fitted with ``auto`` gets the lot's family:
the one most of its fitted samples chose; a tie goes to the family with the lower
criterion summed over the lot (each sample's own fit for its own family, a refit for the
others), then to registry order. Every sample whose own
family differs is refitted with the lot's family, its order chosen by the criterion
within that family, and keeps a record of its own choice (``SampleResult.own_family``).

The landmarks read from the data and the verdicts do not depend on the family. A refit
that misses the quality bound where the sample's own fit met it, or that fails, is not
used: the sample keeps its own fit, with a warning.
"""

from __future__ import annotations

import math
from collections import Counter
from collections.abc import Callable, Iterable, Sequence
from dataclasses import replace
from typing import Any

from bench.core.model_registry import FAMILY_NAMES
from bench.results import SampleResult

#: ``(sample, refit task)`` -> ``(fit or None, error or None)``, run in order.
Refit = Callable[[Sequence[Any]], Iterable[tuple[Any, str | None]]]


def _criterion(fit: Any, family: str) -> float:
    """The lowest criterion among ``fit``'s candidates of ``family`` (inf if none)."""
    if fit is None:
        return math.inf
    values = [c.bic for c in fit.candidates if c.model == family and math.isfinite(c.bic)]
    return min(values) if values else math.inf


def one_family_per_lot(
    samples: Sequence[SampleResult],
    tasks: Sequence[tuple[str, Any, float]],
    refit: Refit,
) -> list[SampleResult]:
    """``samples`` with every part fitted by ``auto`` brought to its lot's family.

    ``tasks[i]`` is sample ``i``'s fit task ``(model, data, valid_above_hz)``; ``refit``
    runs a list of such tasks (e.g. on a process pool) and yields ``(fit, error)``.
    A tie is settled on each tied family's criterion summed over the lot: a sample's own
    fit gives it for its own family, a refit with the other family (made anyway, as the
    sample is refitted if that family wins) for the others.
    """
    out = list(samples)
    lots: list[tuple[list[int], list[str], str]] = []
    wanted: list[tuple[int, str]] = []
    for part in dict.fromkeys(s.part for s in samples):
        index = [
            i
            for i, s in enumerate(samples)
            if s.part == part and tasks[i][0] == "auto" and s.fit is not None
        ]
        counts = Counter(samples[i].fit.model for i in index)
        if len(counts) < 2:
            continue
        top = max(counts.values())
        tied = [name for name, n in counts.items() if n == top]
        listed = ", ".join(f"{name} ×{n}" for name, n in counts.most_common())
        lots.append((index, tied, listed))
        wanted += [(i, family) for family in tied for i in index if out[i].fit.model != family]
    if not wanted:
        return out
    jobs = [(family, tasks[i][1], tasks[i][2]) for i, family in wanted]
    refits = dict(zip(wanted, refit(jobs), strict=True))
    rank = {name: k for k, name in enumerate(FAMILY_NAMES)}
    for index, tied, listed in lots:

        def summed(family: str, index: list[int] = index) -> float:
            return sum(
                _criterion(samples[i].fit, family)
                if samples[i].fit.model == family
                else _criterion(refits[(i, family)][0], family)
                for i in index
            )

        if len(tied) == 1:
            family, why = tied[0], f"the majority of the lot's fits ({listed})"
        else:
            family = min(tied, key=lambda name: (summed(name), rank.get(name, len(rank))))
            why = f"a tie ({listed}) settled by the lower summed criterion"
        for i in index:
            if samples[i].fit.model != family:
                new, error = refits[(i, family)]
                out[i] = _lot_fit(samples[i], family, why, new, error)
    return out


def _lot_fit(
    sample: SampleResult, family: str, why: str, new: Any, error: str | None
) -> SampleResult:
    """``sample`` with the lot's refit, or with its own fit and a warning when the refit
    failed or misses the quality bound its own fit met."""
    own = sample.fit
    assert own is not None
    if new is None or (own.meets_quality and not new.meets_quality):
        reason = f"failed ({error})" if new is None else "misses the quality bound its own met"
        note = (
            f"lot family {family} ({why}) not used for {sample.label}: its refit "
            f"{reason}; kept its own choice {own.model}"
        )
        return replace(sample, warnings=(*sample.warnings, note))
    note = (
        f"family {family} set by the lot ({why}); the sample's own choice was "
        f"{own.model} (order {own.order})"
    )
    # The own fit's warnings give way to the refit's (added where the fit is shown).
    kept = tuple(w for w in sample.warnings if w not in (own.warnings or ()))
    return replace(sample, fit=new, own_family=own.model, warnings=(*kept, note))


def family_record(sample: SampleResult) -> dict[str, Any]:
    """The fit JSON's ``family`` entry: who set the family, and the sample's own choice."""
    fit = sample.fit
    own = sample.own_family or (fit.model if fit is not None else None)
    return {"family": {"set_by": "lot" if sample.own_family else "sample", "own_choice": own}}
