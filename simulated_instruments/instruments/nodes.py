"""Command-tree nodes shared by the simulated instruments.

Most nodes of an instrument are settings: a set handler that reads one parameter, checks
it and stores it on an object under that object's lock, and a query handler that answers
it. :class:`Nodes` builds such a pair on a :class:`CommandTree` for a numeric,
whole-number, choice or on/off setting, and a query or a command that takes no
parameter. :func:`wait_for_sweep` is the wait of an overlapped sweep (``*OPC?``, ``*WAI``,
data queries) that a new message interrupts.
"""

from __future__ import annotations

import time
from collections.abc import Callable, Iterable
from typing import Any

import numpy as np

from simulated_instruments.scpi import (
    CommandTree,
    ScpiError,
    Session,
    format_number,
    parse_boolean,
    parse_choice,
    parse_integer,
    parse_numeric,
)


def one(params: list[str], name: str) -> str:
    """The single parameter of a command (-109 if missing, -108 if more)."""
    if not params:
        raise ScpiError(-109, name)
    if len(params) > 1:
        raise ScpiError(-108, f"{name}: {params[1][:40]}")
    return params[0]


def none(params: list[str]) -> None:
    """A command or query that takes no parameter (-108 if it has one)."""
    if params:
        raise ScpiError(-108, params[0][:40])


class Nodes:
    """Builds an instrument's nodes on ``tree`` whose settings live on ``owner``.

    ``owner`` holds each setting as an attribute and a ``lock`` taken while one is set.
    """

    def __init__(self, tree: CommandTree, owner: Any):
        self.tree = tree
        self.owner = owner

    def query(self, pattern: str, answer: Callable[[], str]) -> None:
        """A query without parameters answered by ``answer()``."""

        def query(s: Session, p: list[str]) -> str:
            none(p)
            return answer()

        self.tree.add(pattern, query=query)

    def action(self, pattern: str, action: Callable[[], None]) -> None:
        """A command without parameters that runs ``action()``."""

        def set_(s: Session, p: list[str]) -> None:
            none(p)
            action()

        self.tree.add(pattern, set=set_)

    def numeric(
        self,
        pattern: str,
        attr: str,
        unit: str | None,
        minimum: float,
        maximum: float,
        *,
        default: float | None = None,
    ) -> None:
        """A decimal setting in ``unit`` within [minimum, maximum] (``DEFault``: ``default``).

        Settings named ``start`` and ``stop`` keep start ≤ stop as analysers do: moving one
        past the other drags it along.
        """
        owner = self.owner

        def set_(s: Session, p: list[str]) -> None:
            value = parse_numeric(
                one(p, pattern), unit, minimum=minimum, maximum=maximum, default=default, name=attr
            )
            with owner.lock:
                setattr(owner, attr, value)
                if attr == "start" and owner.stop < value:
                    owner.stop = value
                if attr == "stop" and owner.start > value:
                    owner.start = value

        self.tree.add(pattern, set=set_, query=self._answer(attr, format_number))

    def integer(self, pattern: str, attr: str, minimum: int, maximum: int) -> None:
        """A whole-number setting within [minimum, maximum]."""
        owner = self.owner

        def set_(s: Session, p: list[str]) -> None:
            value = parse_integer(one(p, attr), minimum=minimum, maximum=maximum, name=attr)
            with owner.lock:
                setattr(owner, attr, value)

        self.tree.add(pattern, set=set_, query=self._answer(attr, str))

    def choice(self, pattern: str, attr: str, choices: Iterable[str], *, name: str) -> None:
        """A setting among ``choices``, kept in its long upper-case form and answered in
        its first three letters (``LOGarithmic`` -> ``LOG``)."""
        owner = self.owner
        choices = tuple(choices)

        def set_(s: Session, p: list[str]) -> None:
            value = parse_choice(one(p, name), choices, name=name)
            with owner.lock:
                setattr(owner, attr, value)

        self.tree.add(pattern, set=set_, query=self._answer(attr, lambda v: v[:3]))

    def boolean(
        self, pattern: str, attr: str, *, name: str, answers: tuple[str, str] = ("0", "1")
    ) -> None:
        """An on/off setting; the query answers ``answers`` (off, on)."""
        owner = self.owner

        def set_(s: Session, p: list[str]) -> None:
            value = parse_boolean(one(p, name), name=name)
            with owner.lock:
                setattr(owner, attr, value)

        self.tree.add(pattern, set=set_, query=self._answer(attr, lambda v: answers[bool(v)]))

    def _answer(self, attr: str, text: Callable[[Any], str]):
        def query(s: Session, p: list[str]) -> str:
            none(p)
            return text(getattr(self.owner, attr))

        return query


def sweep_frequencies(start: float, stop: float, points: int, spacing: str) -> np.ndarray:
    """The stimulus grid, Hz: ``LOGARITHMIC`` spacing, else linear."""
    if spacing == "LOGARITHMIC":
        return np.geomspace(start, stop, points)
    return np.linspace(start, stop, points)


def wait_for_sweep(done_at: float, stopping: Any, session: Session) -> None:
    """Wait until ``time.monotonic()`` reaches ``done_at``.

    A bench that is stopping (``stopping``, a set event) ends the wait with ``-200``; a new
    message from the client interrupts it with ``-410``, as IEEE 488.2 §6.3.2.3 asks of a
    query whose answer is overtaken.
    """
    while True:
        left = done_at - time.monotonic()
        if left <= 0:
            return
        if stopping.is_set():
            raise ScpiError(-200, "the bench is stopping; the sweep will not finish")
        if session.input_pending():
            raise ScpiError(-410, "new message while waiting for the sweep")
        time.sleep(min(left, 0.005))
