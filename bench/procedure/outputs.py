"""Every file a plan will write, known at ``check`` time: unique, and short enough to exist.

Names are built with the same functions the run store, the exports and the report use
(:func:`bench.runstore.file_stem`, :func:`bench.exports.safe_filename`,
:func:`bench.exports.spice_name`), so two parts that would map to one file
(``A_s1``/``x`` and ``A``/``s1_x`` both give ``raw/A_s1_x_0V.s2p``) are found before a
sweep could overwrite another, or a resume adopt the wrong part's file. Names are
compared case-folded, as a case-insensitive file system would, and each must leave room
for the temporary and numbered names written beside it within the usual 255-byte limit
of a file name.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

from bench.errors import ProcedureError
from bench.exports import safe_filename, spice_name
from bench.results import SampleResult
from bench.runstore import file_stem

if TYPE_CHECKING:
    from bench.procedure.loader import SourceDocument
    from bench.procedure.plan import Plan

#: The longest file name (bytes) most file systems take.
NAME_MAX = 255
#: Room kept for what is written beside a planned file: an atomic write's temporary
#: ``.<name>.XXXXXXXX.tmp`` and a repeated sweep's ``<name>.<n>.s2p``.
NAME_MARGIN = 20
#: The run folder's ``<UTC stamp>-<name>-<n>`` around the plan's name.
RUN_FOLDER_MARGIN = len("20260101-000000--99")

_SWEEP_STEPS = ("calibrate", "mount_open", "mount_short", "measure")


@dataclass(frozen=True)
class PlannedFile:
    """A file (``raw/A_s1_0V.s2p``) or SPICE subcircuit name, and what writes it."""

    name: str
    what: str
    key_path: tuple[Any, ...]


class _Labelled:
    """What :attr:`bench.results.SampleResult.label` reads, taken from a measure step."""

    def __init__(self, step: Any):
        self.part = step.placement.part
        self.sample = step.placement.sample
        self.bias_v = step.bias_v


def planned_files(plan: Plan) -> list[PlannedFile]:
    """The files (relative to the run folder) and SPICE names a run of ``plan`` writes."""
    index = {part.name: i for i, part in enumerate(plan.parts)}
    files: list[PlannedFile] = []
    for step in plan.steps:
        if step.kind not in _SWEEP_STEPS:
            continue
        where: tuple[Any, ...] = ("steps",)
        what = f"step {step.id}"
        if step.placement is not None:
            where = ("parts", index[step.placement.part], "name")
            what = f"part {step.placement.part!r} sample {step.placement.sample!r}"
            if step.bias_v:
                what += f" at {step.bias_v:g} V"
        files.append(PlannedFile(f"raw/{file_stem(step.id)}.s2p", what, where))
        if step.placement is None:
            continue
        label = SampleResult.label.fget(_Labelled(step))  # type: ignore[union-attr]
        stem = safe_filename(label)
        for name in (
            f"corrected/{stem}.s2p",
            f"corrected/{stem}.s1p",
            f"models/{stem}.sub",
            f"plots/{stem}_impedance.png",
        ):
            files.append(PlannedFile(name, what, where))
        files.append(PlannedFile(f"spice:{spice_name(label)}", what, where))
    for i, part in enumerate(plan.parts):
        stem = safe_filename(part.name)
        what = f"part {part.name!r}"
        where = ("parts", i, "name")
        for name in (f"models/{stem}.lib", f"models/{stem}_bias.csv"):
            files.append(PlannedFile(name, what, where))
        for name in (f"plots/{stem}_lot.png", f"plots/{stem}_bias.png"):
            files.append(PlannedFile(name, what, where))
        files.append(PlannedFile(f"spice:{spice_name(f'{part.name}_typ')}", what, where))
    return files


def output_errors(doc: SourceDocument, plan: Plan) -> list[ProcedureError]:
    """Two outputs on one file (or SPICE name), or a name too long for a file system."""
    errors: list[ProcedureError] = []
    folder = len(plan.name.encode("utf-8")) + RUN_FOLDER_MARGIN
    if folder > NAME_MAX:
        errors.append(
            doc.error(
                ("name",),
                f"the run folder's name would be {folder} bytes long, above the "
                f"{NAME_MAX} a file name may have",
                hint=f"shorten the name to at most {NAME_MAX - RUN_FOLDER_MARGIN} characters",
            )
        )
    seen: dict[str, PlannedFile] = {}
    reported: set[tuple[str, ...]] = set()
    too_long: set[tuple[Any, ...]] = set()
    for planned in planned_files(plan):
        leaf = planned.name.rsplit("/", 1)[-1]
        length = len(leaf.encode("utf-8"))
        if (
            not planned.name.startswith("spice:")
            and length + NAME_MARGIN > NAME_MAX
            and planned.key_path not in too_long
        ):
            too_long.add(planned.key_path)
            errors.append(
                doc.error(
                    planned.key_path,
                    f"{_short(planned.what)} would write {_short(planned.name)}, a file name of "
                    f"{length} bytes: too long for a file system",
                    hint=f"keep each part's and sample's names (with the bias) under "
                    f"{NAME_MAX - NAME_MARGIN - 30} characters together",
                )
            )
        key = planned.name.casefold()
        other = seen.get(key)
        if other is None:
            seen[key] = planned
            continue
        pair = tuple(sorted((other.what, planned.what)))
        if other.what == planned.what or pair in reported:
            continue
        reported.add(pair)
        thing = (
            f"the SPICE subcircuit name {planned.name.removeprefix('spice:')}"
            if planned.name.startswith("spice:")
            else planned.name
        )
        errors.append(
            doc.error(
                planned.key_path,
                f"{_short(other.what)} and {_short(planned.what)} would both write {_short(thing)}",
                hint="rename one of the parts or samples so their names differ by more than "
                "'_', '.', letter case or the characters a file name cannot hold",
            )
        )
    return errors


def _short(text: str, limit: int = 80) -> str:
    """``text`` cut to ``limit`` characters with an ellipsis in the middle."""
    if len(text) <= limit:
        return text
    half = (limit - 1) // 2
    return f"{text[:half]}…{text[-half:]}"
