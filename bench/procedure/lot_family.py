"""One model family per lot.

``auto`` chooses a family for each sample on its own, so two samples of one part may come
out in different families (one two-branch, one ladder) although they are the same
circuit. After the per-sample fits, each part fitted with ``auto`` gets the lot's family:
the one most of its fitted samples chose; a tie goes to the family with the lower
criterion summed over the lot (each sample's best order of that family, from the
candidates its own ``auto`` fit tried), then to registry order. Every sample whose own
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


def lot_family(samples: Sequence[SampleResult]) -> tuple[str, str] | None:
    """The family of a lot's fitted ``samples`` (one part) and how it was chosen, or None
    when they already agree (or none was fitted)."""
    fitted = [s for s in samples if s.fit is not None]
    counts = Counter(s.fit.model for s in fitted)
    if len(counts) < 2:
        return None
    top = max(counts.values())
    tied = [name for name, n in counts.items() if n == top]
    listed = ", ".join(f"{name} ×{n}" for name, n in counts.most_common())
    if len(tied) == 1:
        return tied[0], f"the majority of the lot's fits ({listed})"

    def summed(name: str) -> float:
        total = 0.0
        for s in fitted:
            bics = [c.bic for c in s.fit.candidates if c.model == name and math.isfinite(c.bic)]
            total += min(bics) if bics else math.inf
        return total

    rank = {name: i for i, name in enumerate(FAMILY_NAMES)}
    family = min(tied, key=lambda name: (summed(name), rank.get(name, len(rank))))
    return family, f"a tie ({listed}) settled by the lower summed criterion"


def one_family_per_lot(
    samples: Sequence[SampleResult],
    tasks: Sequence[tuple[str, Any, float]],
    refit: Refit,
) -> list[SampleResult]:
    """``samples`` with every part fitted by ``auto`` brought to its lot's family.

    ``tasks[i]`` is sample ``i``'s fit task ``(model, data, valid_above_hz)``; ``refit``
    runs a list of such tasks (e.g. on a process pool) and yields ``(fit, error)``.
    """
    out = list(samples)
    parts = dict.fromkeys(s.part for s in samples)
    todo: list[tuple[int, str, str]] = []
    for part in parts:
        index = [i for i, s in enumerate(samples) if s.part == part and tasks[i][0] == "auto"]
        chosen = lot_family([samples[i] for i in index])
        if chosen is None:
            continue
        family, why = chosen
        for i in index:
            fit = samples[i].fit
            if fit is not None and fit.model != family:
                todo.append((i, family, why))
    if not todo:
        return out
    jobs = [(family, tasks[i][1], tasks[i][2]) for i, family, _ in todo]
    for (i, family, why), (new, error) in zip(todo, refit(jobs), strict=True):
        sample = out[i]
        own = sample.fit
        assert own is not None
        if new is None or (own.meets_quality and not new.meets_quality):
            reason = f"failed ({error})" if new is None else "misses the quality bound its own met"
            note = (
                f"lot family {family} ({why}) not used for {sample.label}: its refit "
                f"{reason}; kept its own choice {own.model}"
            )
            out[i] = replace(sample, warnings=(*sample.warnings, note))
            continue
        note = (
            f"family {family} set by the lot ({why}); the sample's own choice was "
            f"{own.model} (order {own.order})"
        )
        # The own fit's warnings give way to the refit's (added where the fit is shown).
        kept = tuple(w for w in sample.warnings if w not in (own.warnings or ()))
        out[i] = replace(sample, fit=new, own_family=own.model, warnings=(*kept, note))
    return out


def family_record(sample: SampleResult) -> dict[str, Any]:
    """The fit JSON's ``family`` entry: who set the family, and the sample's own choice."""
    fit = sample.fit
    own = sample.own_family or (fit.model if fit is not None else None)
    return {"family": {"set_by": "lot" if sample.own_family else "sample", "own_choice": own}}
