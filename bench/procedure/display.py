"""What the person watching a run sees: progress, each part's result, messages.

:class:`RichDisplay` draws a progress bar with the time remaining and prints one result
line per part (rich); :class:`PlainDisplay` writes plain lines to a callable (logs, tests).
"""

from __future__ import annotations

import re
from collections.abc import Callable
from typing import Any

from bench.units import format_si


class PlainDisplay:
    """Plain lines through ``say`` (default: discard)."""

    def __init__(self, say: Callable[[str], None] | None = None):
        self._say = say or (lambda text: None)

    def start(self, total: int, estimated_s: float) -> None:
        self._say(f"{total} sweep(s) to go, about {estimated_s:.0f} s")

    def step(self, text: str) -> None:
        self._say(text)

    def advance(self, n: int = 1) -> None:
        pass

    def result(self, text: str) -> None:
        self._say(text)

    def message(self, text: str) -> None:
        self._say(text)

    def pause(self) -> Any:
        """A context in which the console is free for a prompt."""
        import contextlib

        return contextlib.nullcontext()

    def stop(self) -> None:
        pass


class RichDisplay(PlainDisplay):
    """A live progress bar (with time remaining) and result lines, on a rich console."""

    def __init__(self, console: Any = None):
        from rich.console import Console

        self.console = console or Console()
        self._progress: Any = None
        self._task: Any = None

    def start(self, total: int, estimated_s: float) -> None:
        from rich.progress import (
            BarColumn,
            MofNCompleteColumn,
            Progress,
            TextColumn,
            TimeElapsedColumn,
            TimeRemainingColumn,
        )

        self._progress = Progress(
            TextColumn("{task.description:<40}"),
            BarColumn(),
            MofNCompleteColumn(),
            TimeElapsedColumn(),
            TextColumn("left"),
            TimeRemainingColumn(),
            console=self.console,
            # Transient: a pause for a prompt (and the end of the run) clears the bar
            # instead of leaving a stale copy of it above every prompt.
            transient=True,
        )
        self._progress.start()
        self._task = self._progress.add_task("starting", total=max(total, 1))

    def step(self, text: str) -> None:
        if self._progress is not None:
            self._progress.update(self._task, description=text)
        else:
            self.console.print(text)

    def advance(self, n: int = 1) -> None:
        if self._progress is not None:
            self._progress.advance(self._task, n)

    def result(self, text: str) -> None:
        self._print(text)

    def message(self, text: str) -> None:
        self._print(text)

    def _print(self, text: str) -> None:
        # Fold long result lines between fields (not inside "3.62 µF") at the console's
        # width; rich would otherwise break them at any space.
        self.console.print(
            fit_width(text, self.console.width), markup=False, highlight=False, soft_wrap=False
        )

    def pause(self) -> Any:
        import contextlib

        if self._progress is None:
            return contextlib.nullcontext()
        progress = self._progress

        @contextlib.contextmanager
        def paused() -> Any:
            progress.stop()
            try:
                yield
            finally:
                progress.start()

        return paused()

    def stop(self) -> None:
        if self._progress is not None:
            self._progress.stop()
            self._progress = None


#: A trailing bias in a result label: ``MC4U7-10V/s1 2.5V`` (live) or
#: ``MC4U7-10V_s1_2.5V`` (a sample label), as the runner writes them.
_LABEL_BIAS = re.compile(r"[ _](\d+(?:\.\d+)?)V$")

#: Width of the label column of result lines (longer labels push the values right).
LABEL_WIDTH = 21


def label_bias(label: str) -> float:
    """The DC bias (V) a result label ends with, 0.0 when it names none."""
    match = _LABEL_BIAS.search(label)
    return float(match.group(1)) if match else 0.0


def result_line(
    label: str,
    kind: str,
    landmarks: dict[str, Any],
    *,
    nominal: float | None,
    tolerance: float | None,
    outside: int = 0,
    bias_v: float | None = None,
    reference: float | None = None,
    z_at_nominal: float | None = None,
    nominal_at_hz: float | None = None,
) -> str:
    """One line per measured part: C, ESL, SRF, ESR (or L, Rdc, SRF, Z@SRF) and a verdict.

    For a bead whose tolerance is stated at a frequency, ``z_at_nominal`` (|Z| in Ω at
    ``nominal_at_hz``) leads the line and is the value judged.

    At 0 V the main landmark (``c_low`` F, ``l_low`` H) is compared with ``nominal``
    and ``tolerance`` (a fraction): ``+2.5 % vs nominal, inside ±20 %``. A nominal
    value is stated without bias, so at a DC-bias point (``bias_v`` > 0 V; when None it
    is read from a trailing ``2.5V`` in ``label``) there is no verdict, as in the
    exports: the line gives the change from ``reference`` (the same sample's main
    landmark at 0 V) when known, and nothing in place of a verdict otherwise. Fields are
    separated by two spaces, so :func:`fit_width` can fold a long line between them.
    """

    def si(key: str, unit: str) -> str:
        value = landmarks.get(key)
        return format_si(value, unit, 3) if isinstance(value, (int, float)) else "—"

    if kind in ("mlcc", "bulk"):
        fields = [
            f"C {si('c_low', 'F'):>7}",
            f"ESL {si('esl', 'H'):>7}",
            f"SRF {si('srf', 'Hz'):>8}",
            f"ESR {si('esr_at_srf', 'Ω'):>7}",
        ]
        main = landmarks.get("c_low")
    elif kind == "bead" and z_at_nominal is not None and nominal_at_hz:
        # A bead's tolerance is stated on |Z| at a frequency (Ω at Hz), as in the exports.
        at = format_si(nominal_at_hz, "Hz", 3).replace(" ", "")
        fields = [
            f"|Z|@{at} {format_si(z_at_nominal, 'Ω', 3):>7}",
            f"Rdc {si('r_dc', 'Ω'):>7}",
            f"SRF {si('srf', 'Hz'):>8}",
        ]
        main = z_at_nominal
    else:
        fields = [
            f"L {si('l_low', 'H'):>7}",
            f"Rdc {si('r_dc', 'Ω'):>7}",
            f"SRF {si('srf', 'Hz'):>8}",
            f"Z@SRF {si('z_at_srf', 'Ω'):>7}",
        ]
        main = landmarks.get("l_low") if kind == "inductor" else None
    bias = label_bias(label) if bias_v is None else float(bias_v)
    if isinstance(main, (int, float)) and bias:
        # No verdict: the nominal value is stated at 0 V. Without the 0 V value there is
        # nothing to compare with, and the line stays one line.
        if reference:
            fields.append(f"{(main / reference - 1.0) * 100:+.1f} % vs 0 V, no verdict under bias")
    elif nominal and tolerance and isinstance(main, (int, float)):
        deviation = main / nominal - 1.0
        verdict = "inside" if abs(deviation) <= tolerance * (1 + 1e-12) else "OUTSIDE"
        fields.append(f"{deviation * 100:+.1f} % vs nominal, {verdict} ±{tolerance * 100:g} %")
    if outside:
        fields.append(f"({outside} point{'s' if outside != 1 else ''} outside the window)")
    return f"{label:<{LABEL_WIDTH}}  " + "  ".join(fields)


#: Where a result line may be folded: two or more spaces before a field that does not
#: start with a digit or a dash (those are right-aligned values such as "C   4.5 µF").
_FIELD_BOUNDARY = re.compile(r" {2,}(?=[^\s\d—])")
#: Where a line without fields (a sentence) may be folded: a space after a word, never
#: the one between a number and its unit ("0.05 s", "4.57 µF") or before a number.
_WORD_BOUNDARY = re.compile(r"(?<![\d.±+−-]) +(?=[^\s\d])")
FOLD_INDENT = 4


def fit_width(text: str, width: int) -> str:
    """Fold each line of ``text`` longer than ``width`` between its fields.

    Fields are separated by two or more spaces (:data:`_FIELD_BOUNDARY`); a line with
    none to fold at is folded between its words (:data:`_WORD_BOUNDARY`), which keeps a
    number with its unit. Continuation lines are indented by :data:`FOLD_INDENT`
    spaces. A line with neither (one long word) is left as it is.
    """
    out = []
    for line in text.split("\n"):
        while len(line) > width:
            cuts = _cuts(_FIELD_BOUNDARY, line, width) or _cuts(_WORD_BOUNDARY, line, width)
            if not cuts:
                break
            out.append(line[: cuts[-1].start()])
            line = " " * FOLD_INDENT + line[cuts[-1].end() :]
        out.append(line)
    return "\n".join(out)


def _cuts(boundary: re.Pattern[str], line: str, width: int) -> list[re.Match[str]]:
    """The matches of ``boundary`` in ``line`` where it may be folded to fit ``width``."""
    return [m for m in boundary.finditer(line) if FOLD_INDENT < m.start() <= width]
