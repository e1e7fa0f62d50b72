"""What the person watching a run sees: progress, each part's result, messages.

:class:`RichDisplay` draws a progress bar with the time remaining and prints one result
line per part (rich); :class:`PlainDisplay` writes plain lines to a callable (logs, tests).
"""

from __future__ import annotations

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
            transient=False,
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
        self.console.print(text, markup=False, highlight=False)

    def message(self, text: str) -> None:
        self.console.print(text, markup=False, highlight=False)

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


def result_line(
    label: str,
    kind: str,
    landmarks: dict[str, Any],
    *,
    nominal: float | None,
    tolerance: float | None,
    outside: int = 0,
) -> str:
    """One line per measured part: C, ESL, SRF, ESR (or L, Rdc, SRF) and the verdict."""

    def si(key: str, unit: str) -> str:
        value = landmarks.get(key)
        return format_si(value, unit, 3) if isinstance(value, (int, float)) else "—"

    if kind in ("mlcc", "bulk"):
        text = (
            f"{label:<22} C {si('c_low', 'F'):>9}  ESL {si('esl', 'H'):>9}  "
            f"SRF {si('srf', 'Hz'):>10}  ESR {si('esr_at_srf', 'Ω'):>9}"
        )
        main = landmarks.get("c_low")
    else:
        text = (
            f"{label:<22} L {si('l_low', 'H'):>9}  Rdc {si('r_dc', 'Ω'):>9}  "
            f"SRF {si('srf', 'Hz'):>10}  Z@SRF {si('z_at_srf', 'Ω'):>9}"
        )
        main = landmarks.get("l_low") if kind == "inductor" else None
    if nominal and tolerance and isinstance(main, (int, float)):
        deviation = main / nominal - 1.0
        verdict = "inside" if abs(deviation) <= tolerance else "OUTSIDE"
        text += f"  {deviation * 100:+.1f} % {verdict} ±{tolerance * 100:g} %"
    if outside:
        text += f"  ({outside} points outside the window)"
    return text
