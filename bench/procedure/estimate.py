"""How long a run takes: the estimate given at its start, and what it really took.

The estimate adds up what each pending step costs:

- **instruments**: each sweep (the analyser's own sweep time when it reports one, else
  the model below) times the averages, the fixture switch's settling per position
  change, and for each bias point the ramp up and down, the settle wait and the
  discharge wait; plus zbench's own work per sweep (transfer, storing, the live line);
- **operator**: a person's allowance per physical action (a cable moved or a standard
  fitted, a part or strap fitted by hand) and, in a guided session, per result read and
  answered. The simulated bench's scripted hands take no time;
- **processing**: the fits, the exports and the report. Their cost on this machine now
  is timed at the session's start (:mod:`bench.procedure.cost`: one fit of an invented
  part of the plan's point count; a report figure counted in such fits) and scaled by
  the plan's counts (samples × bias points, figures) over the worker processes they
  share (the available cores, as :mod:`bench.parallel` uses them), less the fits made
  during the measure steps' sweeps (:mod:`bench.procedure.early_fit`). Without that
  timing (an estimate of a plan alone) fixed allowances stand in.

The estimate's total also holds the seconds the session spent before it was made
(``elapsed``: the instruments set up, the timing above), which its measured total counts.

On the simulated bench every instrument duration and every wait of zbench's on the
bench (ramp dwell, settle, discharge) runs ``time_scale`` times faster; the estimate is
scaled the same way, so it stays comparable with the run's measured time.

The runner records both in the manifest (``timing``: one entry per session, with the
estimate and the measured ``instruments``, ``operator``, ``processing`` and ``total``
seconds).
"""

from __future__ import annotations

import dataclasses
import math
from collections.abc import Sequence
from typing import TYPE_CHECKING, Any

from bench.procedure.plan_types import GAIN_PHASE, SINGLE_MOUNT_METHODS, SWEEP_STEPS, Plan, Step

if TYPE_CHECKING:
    from bench.procedure.cost import Costs

#: A person's allowance per action (s). Common practice, no source: figures for a
#: practised operator at a tidy bench; slower hands make the run longer, not wrong.
CONNECT_S = 30.0  # cables moved, or a calibration standard fitted on both cable ends
FIT_S = 15.0  # one part or strap fitted in (or removed from) a mount by hand
DECIDE_S = 5.0  # a guided session: the result line read and answered
CAUTION_S = 10.0  # the DC-bias caution read and acknowledged

#: zbench's own time per sweep (s, not scaled): reading four traces, storing them, the
#: live line. Measured on the simulated bench over loopback (about 20-40 ms at 21 points
#: on an idle machine); the per-point part is the transfer of four ASCII traces.
SWEEP_OVERHEAD_S = 0.04
SWEEP_OVERHEAD_PER_POINT_S = 20e-6
#: One position change of the fixture switch, settling and its confirmation (s, not
#: scaled: a relay settles in milliseconds, the round trip dominates). Common practice.
SWITCH_S = 0.02
#: Processing (s) when it was not timed (``costs`` None): one fit per sample and bias
#: point; exports; the report per part.
FIT_EACH_S = 0.5
EXPORT_S = 1.0
REPORT_S = 2.0
REPORT_PART_S = 0.5
#: With the machine's costs timed (:class:`bench.procedure.cost.Costs`), the rest of a
#: sample's processing in units of the timed invented fit: its raw sweeps corrected, its
#: fixture's ground-loop check, its real fit (screening, a wider climb, stitched set-ups,
#: the lot's family), its exports and its share of the report's text. Our measurement,
#: from the demo's step times on a busy two-core machine (19 samples on 2 workers: the fit
#: step 12 to 25 timed fits long over four runs at load 5 to 9, the middle ~20; an
#: earlier profile gave 5.5 before the calibration, landmarks and ground-loop checks were
#: made once per run); the ratios, not the seconds, carry over to another machine or load.
SAMPLE_PER_FIT = 2.2
#: The part of a sample's processing that is its fit, which the workers make during the
#: sweeps (the rest, its correction and the lot's family, stays in the fit step). Our
#: measurement: a profile of the demo's samples, the fit 20 to 70 ms of 50 to 100 ms.
FIT_PART = 0.5
EXPORT_PER_FIT = 0.4
REPORT_TEXT_PER_FIT = 0.4
#: A report figure of real data (several set-ups, more series and labels) against the
#: invented part's figure timed fresh: the report's workers reuse one figure per layout
#: (:func:`bench.plots.reusing_figures`), which the timed figure cannot. From the same
#: four runs (the export and report steps together, 27 figures on 2 workers): 0.6 to
#: 1.5, the middle ~0.85 (our measurement; 1.1 before the reuse).
FIGURE_PER_FIGURE = 0.85

#: Step kinds whose time is the instruments' (and the hands'); the rest is processing.
BENCH_KINDS = SWEEP_STEPS


def network_sweep_seconds(plan: Plan) -> float:
    """One sweep of the network analyser by the model (s): the source runs from each
    port in turn for the four S-parameters, each point waits 1.2 periods of the IF
    bandwidth, plus 50 ms of set-up (common practice, no source)."""
    s = plan.sweep
    return 0.05 + 2 * s.points * 1.2 / s.if_bandwidth


@dataclasses.dataclass(frozen=True)
class Estimate:
    """The expected duration of the pending steps, by part (s of wall time)."""

    sweeps: int
    sweep_s: float  # one network-analyser sweep, wall time
    sweep_source: str  # "the analyser" or "the model"
    bias_s: float
    instruments: float
    connections: int
    fittings: int
    decisions: int
    operator: float
    processing: float
    caution: bool = False
    #: Seconds the session spent before the estimate (instruments set up, costs timed).
    elapsed: float = 0.0
    #: Report figures counted, worker processes, and the costs timed on this machine.
    figures: int = 0
    workers: int = 1
    costs: Costs | None = None

    @property
    def total(self) -> float:
        return self.elapsed + self.instruments + self.operator + self.processing

    def record(self) -> dict[str, Any]:
        out: dict[str, Any] = {
            k: round(v, 3) if isinstance(v, float) else v
            for k, v in vars(self).items()
            if k != "costs"
        }
        if self.costs is not None:
            out["costs"] = self.costs.record()
        return {**out, "total": round(self.total, 3)}

    def text(self) -> str:
        parts = [
            f"instruments {duration(self.instruments)} ({self.sweeps} "
            f"sweep{'' if self.sweeps == 1 else 's'} of "
            f"{duration(self.sweep_s)} from {self.sweep_source}"
            + (f", bias ramps and waits {duration(self.bias_s)}" if self.bias_s else "")
            + ")"
        ]
        if self.operator:
            allowances = [f"{CONNECT_S:g} s per connection ×{self.connections}"]
            allowances.append(f"{FIT_S:g} s per part or strap fitted ×{self.fittings}")
            if self.decisions:
                allowances.append(f"{DECIDE_S:g} s per result answered ×{self.decisions}")
            if self.caution:
                allowances.append(f"{CAUTION_S:g} s for the DC-bias caution")
            shown = ", ".join(allowances)
            parts.append(f"operator {duration(self.operator)} (allowance {shown})")
        how = ""
        if self.costs is not None:
            how = (
                f" (timed here: a fit {duration(self.costs.fit_s)}, a figure counted as "
                f"{duration(self.costs.figure_s)}; {self.workers} worker"
                f"{'' if self.workers == 1 else 's'})"
            )
        parts.append(f"fit and report {duration(self.processing)}{how}")
        return f"estimated {duration(self.total)}: " + "; ".join(parts)


def estimate(
    plan: Plan,
    steps: Sequence[Step] | None = None,
    *,
    sweep_s: float | None = None,
    gain_phase_sweep_s: float | None = None,
    time_scale: float = 1.0,
    person: bool = True,
    guided: bool | None = None,
    caution: bool = False,
    costs: Costs | None = None,
    workers: int | None = None,
    elapsed: float = 0.0,
) -> Estimate:
    """The duration of ``steps`` (default: the whole plan).

    ``sweep_s``/``gain_phase_sweep_s``: one sweep as the instrument reports it (its own
    seconds), else the model. ``time_scale``: the simulated bench's clock compression.
    ``person``: a person does the physical actions (else the simulated hands, no time);
    ``guided`` (default: the plan's mode) adds the answer after each sweep.
    ``costs``: zbench's own work timed on this machine (:func:`bench.procedure.cost.measure`;
    None: fixed allowances), shared by ``workers`` processes (default: the available
    cores). ``elapsed``: seconds the session already spent.
    """
    from bench.parallel import available_cores

    workers = available_cores() if workers is None else max(1, workers)
    steps = list(plan.steps if steps is None else steps)
    guided = plan.mode == "guided" if guided is None else guided
    source = "the analyser" if sweep_s is not None else "the model"
    one = (network_sweep_seconds(plan) if sweep_s is None else sweep_s) * time_scale
    gp = None
    if plan.gain_phase is not None:
        gp = gain_phase_sweep_s or plan.gain_phase.sweep_seconds()
        gp *= time_scale
    overhead = SWEEP_OVERHEAD_S + 4 * SWEEP_OVERHEAD_PER_POINT_S * plan.sweep.points
    if costs is not None:
        overhead += costs.sweep_s  # the files stored and the live line, timed here
    n_sweeps = 0
    instruments = bias_total = measuring = 0.0
    switch_at: int | None = None
    b = plan.bias
    for step in steps:
        if step.kind not in SWEEP_STEPS:
            continue
        n_sweeps += plan.sweep.averages
        this = gp if (step.method == GAIN_PHASE and gp is not None) else one
        instruments += plan.sweep.averages * (this + overhead)
        if step.kind == "measure":
            measuring += plan.sweep.averages * (this + overhead)
        on_switch = step.position is not None and step.method not in SINGLE_MOUNT_METHODS
        if on_switch and step.position != switch_at:
            instruments += SWITCH_S
            switch_at = step.position
        if step.bias_v:
            ramp = math.ceil(abs(step.bias_v) / b.ramp_step - 1e-9) * b.ramp_dwell_s
            waits = (2 * ramp + b.settle_s + b.discharge_s) * time_scale
            bias_total += waits
            instruments += waits
    connections, fittings, decisions = actions(plan, steps) if person else (0, 0, 0)
    if not guided:
        decisions = 0
    operator = CONNECT_S * connections + FIT_S * fittings + DECIDE_S * decisions
    caution = person and caution
    if caution:
        operator += CAUTION_S
    kinds = {s.kind for s in steps}
    samples = sum(len(p.samples) * len(p.bias) for p in plan.parts)
    figures = figure_count(plan) if "report" in kinds else 0
    processing = 0.0
    if costs is None:
        if "fit" in kinds:
            processing += FIT_EACH_S * samples
        if "export" in kinds:
            processing += EXPORT_S
        if "report" in kinds:
            processing += REPORT_S + REPORT_PART_S * len(plan.parts)
    else:
        unit = costs.fit_s
        if "fit" in kinds and samples:
            fits = samples * SAMPLE_PER_FIT * unit / min(workers, samples)
            if min(workers, samples) > 1:  # the workers' server starts, or they import
                processing += max(costs.server_s, costs.fitter_import_s)
                # Fitted during the sweeps (bench.procedure.early_fit): the fits of all
                # samples but the last, on the cores the session's own process leaves
                # while it measures.
                early = FIT_PART * fits * (samples - 1) / samples
                fits -= min(early, measuring * (workers - 1) / workers)
            processing += fits
        if "export" in kinds:
            processing += samples * EXPORT_PER_FIT * unit
        if "report" in kinds:
            processing += samples * REPORT_TEXT_PER_FIT * unit
            if figures:
                per = FIGURE_PER_FIGURE * costs.figure_s
                processing += figures * per / min(workers, figures)
                if min(workers, figures) > 1:  # the workers import the plotting library
                    processing += costs.plots_import_s
    return Estimate(
        sweeps=n_sweeps,
        sweep_s=one,
        sweep_source=source,
        bias_s=bias_total,
        instruments=instruments,
        connections=connections,
        fittings=fittings,
        decisions=decisions,
        operator=operator,
        processing=processing,
        caution=caution,
        elapsed=elapsed,
        figures=figures,
        workers=workers,
        costs=costs,
    )


def figure_count(plan: Plan) -> int:
    """The report's figures (``bench.report``): one per sample and bias point, a lot
    overlay per part of several samples, a bias overlay per sample measured at several
    bias points, and a capacitance-versus-bias figure per capacitor part that has them."""
    count = 0
    for part in plan.parts:
        samples, biases = len(part.samples), len(part.bias)
        count += samples * biases + (samples > 1)
        if biases > 1:
            count += samples + (part.spec.kind in ("mlcc", "bulk"))
    return count


def actions(plan: Plan, steps: Sequence[Step]) -> tuple[int, int, int]:
    """(connections, fittings, decisions) a person makes for ``steps``: the cables moved
    or a standard fitted; each part or strap fitted or removed by hand; one answer per
    swept step. Follows what the steps ask of the hands (the straps and empties of every
    pending position in one go, a batch of parts at a time)."""
    connections = fittings = decisions = 0
    cables: str | None = None
    strapped: set[int] = set()
    emptied: set[int] = set()
    batch: int | None = None
    for i, step in enumerate(steps):
        if step.kind not in SWEEP_STEPS:
            continue
        decisions += 1
        if step.kind == "calibrate":
            target = step.standard
        elif step.method in (*SINGLE_MOUNT_METHODS, GAIN_PHASE):
            target = step.method  # a single mount, or the fixture on the gain-phase analyser
        else:
            target = "fixture"
        if target != cables:
            connections += 1
            cables = target
        if step.method in SINGLE_MOUNT_METHODS:
            fittings += 1  # the gap emptied, the strap, or one sample
        elif step.kind in ("mount_short", "mount_open") and step.method != GAIN_PHASE:
            done = strapped if step.kind == "mount_short" else emptied
            if step.position not in done:
                todo = {
                    s.position
                    for s in steps[i:]
                    if s.kind == step.kind and s.position is not None and s.method == step.method
                }
                fittings += len(todo)
                done.update(todo)
                (emptied if step.kind == "mount_short" else strapped).difference_update(todo)
                batch = None
        elif step.placement is not None and batch != step.placement.batch:
            batch = step.placement.batch
            fittings += len(plan.batches[batch])
    return connections, fittings, decisions


def duration(seconds: float) -> str:
    """``0.25 s``, ``4.2 s``, ``42 s``, ``3 min 05 s``, ``1 h 02 min``."""
    if seconds < 1:
        return f"{seconds:.2f} s"
    if seconds < 10:
        return f"{seconds:.1f} s"
    hours, rest = divmod(round(seconds), 3600)
    minutes, secs = divmod(rest, 60)
    if hours:
        return f"{hours} h {minutes:02d} min"
    if minutes:
        return f"{minutes} min {secs:02d} s"
    return f"{secs} s"
