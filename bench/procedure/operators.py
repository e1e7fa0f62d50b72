"""The operator: whoever does what the instruments cannot (connect a standard, place a part).

One interface, one runner code path:

- :class:`ConsoleOperator`: a person at the bench, prompted in plain words. In a guided
  session they also decide after each sweep (repeat it, skip the part, or stop).
- :class:`ScriptedOperator`: the hands of the simulated bench, through its bench-control
  port (:class:`drivers.bench_control.BenchControl`); decisions come from a script.
- :class:`RehearsalOperator`: a rehearsal on the simulated bench: a person answers the
  console's prompts, and the simulated hands do each action once the person confirms it.

Answers after a sweep are one of :data:`DECISIONS`.
"""

from __future__ import annotations

from abc import ABC, abstractmethod
from collections.abc import Callable, Iterable, Iterator, Sequence
from typing import Any

from bench.procedure.plan import Placement

CONTINUE, REPEAT, SKIP, STOP = "continue", "repeat", "skip", "stop"
DECISIONS = (CONTINUE, REPEAT, SKIP, STOP)

STANDARD_WORDS = {
    "short": "the SHORT standard on both cable ends",
    "open": "the OPEN standard on both cable ends",
    "load": "the LOAD (50 Ω) standard on both cable ends",
    "through": "the two cable ends joined with the THROUGH adapter",
}


def _positions(positions: Sequence[int], *, mount: bool = False) -> str:
    """``strap in position 1`` / ``straps in positions 1, 2, 3`` (``mount`` adds the word)."""
    many = len(positions) > 1
    where = ", ".join(map(str, positions))
    mount_word = "mount " if mount else ""
    return f"strap{'s' if many else ''} in {mount_word}position{'s' if many else ''} {where}"


#: What each single mount is, in the operator's words.
MOUNT_WORDS = {
    "series-through": "the SERIES-THROUGH mount",
    "reflection": "the REFLECTION mount",
}


#: The gain-phase analyser's set-up on the fixture, in the operator's words.
GAIN_PHASE_WORDS = "the gain-phase analyser"


class OperatorStop(Exception):  # noqa: N818 (a request, not a failure)
    """The operator chose to stop; the run stays resumable."""


class Operator(ABC):
    """What the runner asks of the hands at the bench. Every call returns when it is done."""

    #: Whether the runner asks :meth:`after_sweep` (guided sessions only).
    guided: bool = False
    #: Whether a person answers at the console (the live display pauses for prompts).
    interactive: bool = False
    #: Whether a person's hands do the physical actions (the estimate allows them time).
    person: bool = True

    @abstractmethod
    def fit_resistors(self, ohms: float) -> None:
        """Fit series resistors of ``ohms`` at both ports (0 removes them)."""

    @abstractmethod
    def fit_transformer(self, on: bool) -> None:
        """Fit (or remove) the common-mode isolation transformer on port 2."""

    @abstractmethod
    def connect_standard(self, standard: str) -> None:
        """Connect ``short``/``open``/``load`` on both cable ends, or the ``through``."""

    @abstractmethod
    def connect_fixture(self) -> None:
        """Connect the cables to the fixture."""

    @abstractmethod
    def strap_mounts(self, positions: Sequence[int]) -> None:
        """Fit the shorting strap in each of ``positions``."""

    @abstractmethod
    def empty_mounts(self, positions: Sequence[int]) -> None:
        """Leave each of ``positions`` empty: no strap, no part, bare pads."""

    @abstractmethod
    def load_parts(self, placements: Sequence[Placement]) -> None:
        """Place each sample in its position (removing any strap there)."""

    def connect_mount(self, method: str) -> None:
        """Move the cables to the ``series-through`` mount (both cables) or the
        ``reflection`` mount (port 1; port 2 left open)."""
        raise NotImplementedError(f"{type(self).__name__} cannot connect {MOUNT_WORDS[method]}")

    def fill_mount(self, method: str, item: str | Placement) -> None:
        """Leave that mount empty (``"empty"``: the gap, or the open), fit its zero-ohm
        strap (``"strap"``), or fit a sample (a :class:`Placement`)."""
        raise NotImplementedError(f"{type(self).__name__} cannot fill {MOUNT_WORDS[method]}")

    def connect_gain_phase(self) -> None:
        """Move the fixture from the network analyser's cables to the gain-phase analyser;
        the next cable action (:meth:`connect_fixture`, ...) moves it back."""
        raise NotImplementedError(f"{type(self).__name__} cannot connect {GAIN_PHASE_WORDS}")

    @abstractmethod
    def caution(self, text: str) -> None:
        """Show a caution; return when it is acknowledged, raise :class:`OperatorStop` if not."""

    def after_sweep(self, label: str, result: str) -> str:
        """Guided sessions: continue, repeat the last sweep, skip this item, or stop."""
        return CONTINUE

    def advise(self, text: str) -> None:  # noqa: B027 (optional hook)
        """Tell the operator something that needs no answer."""

    def confirm(self, question: str) -> bool:
        """A yes/no question about a safe action (scripted hands agree)."""
        return True


class ScriptedOperator(Operator):
    """The simulated bench's hands, through its bench-control instrument.

    ``decisions`` answers :meth:`after_sweep` in turn (then ``continue``); a callable
    ``decide(label, result)`` may be given instead, e.g. to ask a person at a console.
    """

    person = False

    def __init__(
        self,
        bench: Any,
        *,
        guided: bool = False,
        decisions: Iterable[str] = (),
        decide: Callable[[str, str], str] | None = None,
        acknowledge: Callable[[str], None] | None = None,
        say: Callable[[str], None] | None = None,
    ):
        self.bench = bench
        self.guided = guided
        self._decisions: Iterator[str] = iter(decisions)
        self._decide = decide
        self._acknowledge = acknowledge
        self.interactive = decide is not None or acknowledge is not None
        self._say = say or (lambda text: None)
        self.actions: list[str] = []

    def _did(self, text: str) -> None:
        self.actions.append(text)
        self._say(text)

    def fit_resistors(self, ohms: float) -> None:
        self.bench.resistors(ohms)
        self._did(f"series resistors {ohms:g} Ω at both ports" if ohms else "no series resistors")

    def fit_transformer(self, on: bool) -> None:
        self.bench.transformer(on)
        self._did(f"isolation transformer {'fitted' if on else 'removed'}")

    def connect_standard(self, standard: str) -> None:
        if standard == "through":
            self.bench.connect_through()
        else:
            self.bench.connect_standard(standard)
        self._did(f"cables: {STANDARD_WORDS[standard]}")

    def connect_fixture(self) -> None:
        self.bench.connect_fixture()
        self._did("cables: on the fixture")

    def strap_mounts(self, positions: Sequence[int]) -> None:
        for pos in positions:
            self.bench.place(pos, "short")
        self._did(f"shorting {_positions(positions)}")

    def empty_mounts(self, positions: Sequence[int]) -> None:
        for pos in positions:
            self.bench.place(pos, "empty")
        many = len(positions) > 1
        where = ", ".join(map(str, positions))
        self._did(f"emptied mount{'s' if many else ''} in position{'s' if many else ''} {where}")

    def load_parts(self, placements: Sequence[Placement]) -> None:
        for p in placements:
            self.bench.place(p.position, f"{p.part}/{p.sample}")
        self._did("placed " + ", ".join(f"{p.part}/{p.sample}@{p.position}" for p in placements))

    def connect_mount(self, method: str) -> None:
        self.bench.connect_mount(method)
        self._did(f"cables: on {MOUNT_WORDS[method]}")

    def connect_gain_phase(self) -> None:
        self.bench.connect_gain_phase()
        self._did(f"fixture: on {GAIN_PHASE_WORDS}")

    def fill_mount(self, method: str, item: str | Placement) -> None:
        if isinstance(item, Placement):
            self.bench.mount(method, f"{item.part}/{item.sample}")
            self._did(f"placed {item.part}/{item.sample} in {MOUNT_WORDS[method]}")
        else:
            self.bench.mount(method, item)
            what = "zero-ohm strap fitted in" if item == "strap" else "emptied"
            self._did(f"{what} {MOUNT_WORDS[method]}")

    def caution(self, text: str) -> None:
        if self._acknowledge is not None:
            self._acknowledge(text)  # a person watching the dry run acknowledges it
        else:
            self._say(text)

    def after_sweep(self, label: str, result: str) -> str:
        if self._decide is not None:
            return self._decide(label, result)
        return next(self._decisions, CONTINUE)

    def advise(self, text: str) -> None:
        self._say(text)


class ConsoleOperator(Operator):
    """A person at the bench, prompted on a console.

    ``ask(prompt) -> str`` reads one answer (default: :func:`input`); ``say(text)``
    shows text. In a guided session every physical action and every sweep result waits
    for the person; unattended (``guided=False``), only the physical actions do.
    """

    def __init__(
        self,
        *,
        guided: bool = True,
        ask: Callable[[str], str] | None = None,
        say: Callable[[str], None] | None = None,
    ):
        self.guided = guided
        self.interactive = True
        self._ask = ask or input
        self._say = say or print
        self._pending: list[str] = []
        self._gain_phase_on = False

    def confirm(self, question: str) -> bool:
        answer = self._ask(f"{question} [Y/n] ").strip().lower()
        return answer in ("", "y", "yes")

    def _later(self, text: str) -> None:
        # Set-up actions are asked together with the next action, so an unattended run
        # asks for them once, up front.
        self._pending.append(text)

    #: The answer asked for after each physical action.
    ACTION_PROMPT = "  press Enter when done, or type 'stop': "

    def _action(self, text: str) -> None:
        if self._pending:
            text = "\n".join(["Before the run:", *(f"  - {t}" for t in self._pending), text])
            self._pending = []
        self._say(text)
        answer = self._ask(self.ACTION_PROMPT).strip().lower()
        if answer in ("stop", "q", "quit"):
            raise OperatorStop("stopped by the operator")
        self._done(answer)

    def _done(self, answer: str) -> None:
        """The person confirmed the action just asked (a rehearsal's hands act here)."""

    def fit_resistors(self, ohms: float) -> None:
        if ohms:
            self._later(f"fit the {ohms:g} Ω series resistors at both ports")
        else:
            self._later("make sure no series resistors are fitted at the ports")

    def fit_transformer(self, on: bool) -> None:
        if on:
            self._later("fit the common-mode isolation transformer on port 2")
        else:
            self._later("remove the isolation transformer from port 2 (cable connected directly)")

    def _cables(self, text: str) -> None:
        """A cable action; after the gain-phase analyser, it comes off the fixture first."""
        if self._gain_phase_on:
            text = "Disconnect the gain-phase analyser from the fixture. " + text
            self._gain_phase_on = False
        self._action(text)

    def connect_standard(self, standard: str) -> None:
        if standard == "through":
            self._cables("Join the two cable ends with the THROUGH adapter.")
        else:
            self._cables(f"Connect {STANDARD_WORDS[standard]}.")

    def connect_fixture(self) -> None:
        self._cables("Connect both network-analyser cables to the fixture.")

    def connect_gain_phase(self) -> None:
        self._action(
            "Disconnect the network analyser's cables from the fixture and connect the "
            "GAIN-PHASE ANALYSER to it: its source through the reference resistor to the "
            "fixture (receiver A on the source side of the resistor), receiver B across the "
            "fixture. The fixture switch still selects the position."
        )
        self._gain_phase_on = True

    def strap_mounts(self, positions: Sequence[int]) -> None:
        self._action(f"Fit the shorting {_positions(positions, mount=True)}.")

    def empty_mounts(self, positions: Sequence[int]) -> None:
        many = len(positions) > 1
        where = ", ".join(map(str, positions))
        self._action(
            f"Empty the mount{'s' if many else ''} in position{'s' if many else ''} {where}: "
            "no strap, no part, bare pads (the open capture measures the pads' capacitance)."
        )

    def load_parts(self, placements: Sequence[Placement]) -> None:
        lines = [f"  position {p.position}: {p.part} sample {p.sample}" for p in placements]
        self._action("Remove the straps and place:\n" + "\n".join(lines))

    def connect_mount(self, method: str) -> None:
        if method == "reflection":
            self._cables(
                "Connect the port-1 cable to the REFLECTION mount; leave the port-2 cable "
                "unconnected."
            )
        else:
            self._cables(
                "Connect both cables to the SERIES-THROUGH mount (the part sits in series "
                "between them)."
            )

    def fill_mount(self, method: str, item: str | Placement) -> None:
        where = MOUNT_WORDS[method]
        if isinstance(item, Placement):
            self._action(f"Fit {item.part} sample {item.sample} in {where}.")
        elif item == "strap":
            across = "across the gap of" if method == "series-through" else "in"
            self._action(f"Fit the zero-ohm strap {across} {where} (no part).")
        elif method == "series-through":
            self._action(
                f"Leave the gap of {where} EMPTY: no strap, no part (the capture measures "
                "the gap's capacitance)."
            )
        else:
            self._action(
                f"Leave {where} OPEN: no strap, no part (the capture measures the pad's "
                "capacitance)."
            )

    def caution(self, text: str) -> None:
        self._say(text)
        answer = self._ask("  type 'yes' to apply DC bias, anything else stops: ").strip().lower()
        if answer not in ("yes", "y"):
            raise OperatorStop("DC bias not acknowledged")

    def after_sweep(self, label: str, result: str) -> str:
        self._say(result if result.startswith(label) else f"{label}: {result}")
        while True:
            answer = (
                self._ask("  [Enter] continue, (r)epeat sweep, (s)kip, (q) stop: ").strip().lower()
            )
            choice = {
                "": CONTINUE,
                "c": CONTINUE,
                "r": REPEAT,
                "repeat": REPEAT,
                "s": SKIP,
                "skip": SKIP,
                "q": STOP,
                "stop": STOP,
            }.get(answer)
            if choice is not None:
                return choice
            self._say(f"  '{answer}' is not one of the choices")

    def advise(self, text: str) -> None:
        self._say(text)


#: Rehearsal answers that confirm a prompt while the simulated hands do nothing.
FORGET = ("forget", "f")


class RehearsalOperator(ConsoleOperator):
    """A rehearsal on the simulated bench (``zbench run --sim --manual``): the person at
    the terminal answers every prompt as at a real bench, and the simulated ``hands``
    (a :class:`ScriptedOperator`) carry out what the prompt asked only once the person
    confirms it. Answering ``forget`` confirms without the hands acting, as an operator
    who presses Enter without having done it: the run meets the bench as it was.
    Set-up actions asked before the run (resistors, transformer) are always carried out
    with the prompt they were asked with; ``forget`` leaves out that prompt's own action.
    """

    ACTION_PROMPT = (
        "  press Enter when done, or type 'stop' (rehearsal: 'forget' leaves the simulated "
        "bench as it is): "
    )

    def __init__(self, hands: ScriptedOperator, **kwargs: Any):
        super().__init__(**kwargs)
        self.hands = hands
        self._setup: list[Callable[[], None]] = []
        self._act: Callable[[], None] | None = None

    def _done(self, answer: str) -> None:
        setup, self._setup = self._setup, []
        act, self._act = self._act, None
        for do in setup:
            do()
        if answer in FORGET:
            self._say("  (rehearsal: the simulated hands did nothing)")
        elif act is not None:
            act()


#: The operator's answers and notices; every other public method of :class:`Operator` is
#: a physical action, which a rehearsal's hands carry out once the person confirms it.
NOT_ACTIONS = ("caution", "after_sweep", "advise", "confirm")
#: Set-up actions asked together with the next prompt (always carried out with it).
SETUP_ACTIONS = ("fit_resistors", "fit_transformer")
PHYSICAL_ACTIONS = tuple(
    name
    for name, value in vars(Operator).items()
    if callable(value) and not name.startswith("_") and name not in NOT_ACTIONS
)


def _rehearsed(name: str) -> Callable[..., None]:
    def action(self: RehearsalOperator, *args: Any) -> None:
        act = lambda: getattr(self.hands, name)(*args)  # noqa: E731
        if name in SETUP_ACTIONS:
            self._setup.append(act)
        else:
            self._act = act
        getattr(ConsoleOperator, name)(self, *args)

    action.__name__ = name
    action.__doc__ = getattr(Operator, name).__doc__
    return action


for _name in PHYSICAL_ACTIONS:
    setattr(RehearsalOperator, _name, _rehearsed(_name))
