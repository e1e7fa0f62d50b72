"""The simulated fixture switch: one position closed at a time, break-before-make.

``ROUTe:CLOSe (@n)`` opens whatever is closed, then closes ``n`` after the relay's
settle time (scaled by ``time_scale``; ``*OPC?`` waits for it). ``ROUTe:CLOSe? (@n)``
answers 1 or 0 per channel; ``ROUTe:CLOSe:STATe?`` gives the closed channel as a list,
``(@3)`` or ``(@)``; ``ROUTe:OPEN:ALL`` and ``ROUTe:OPEN (@n)`` open.
"""

from __future__ import annotations

import time

from simulated_instruments.instruments.nodes import none, one
from simulated_instruments.scpi import (
    CommandTree,
    Instrument,
    ScpiError,
    Session,
    parse_channel_list,
)
from simulated_instruments.state import BenchState


class Switch(Instrument):
    name = "switch"

    def __init__(self, state: BenchState):
        self.state = state
        self.busy_until = 0.0
        super().__init__()

    def identity(self) -> str:
        return self.state.scenario.switch_identity

    def reset(self) -> None:
        self.state.set_closed(None)

    def wait_idle(self, session: Session) -> None:
        left = self.busy_until - time.monotonic()
        if left > 0:
            time.sleep(left)

    def channels(self, text: str) -> list[int]:
        positions = self.state.scenario.positions
        channels = parse_channel_list(text)
        for ch in channels:
            if not 1 <= ch <= positions:
                raise ScpiError(-222, f"channel {ch}: the fixture has positions 1 to {positions}")
        return channels

    def build(self, tree: CommandTree) -> None:
        def close(s: Session, p: list[str]) -> None:
            channels = self.channels(one(p, "channel list"))
            if len(channels) != 1:
                raise ScpiError(-221, "close exactly one position at a time")
            # Break before make: the old position opens before the new one closes.
            self.state.set_closed(None)
            self.wait_idle(s)
            self.state.set_closed(channels[0])
            self.busy_until = time.monotonic() + self.state.real_seconds(
                self.state.scenario.switch_settle
            )

        def close_query(s: Session, p: list[str]) -> str:
            channels = self.channels(one(p, "channel list"))
            closed = self.state.closed
            return ",".join("1" if ch == closed else "0" for ch in channels)

        def state_query(s: Session, p: list[str]) -> str:
            none(p)
            closed = self.state.closed
            return f"(@{closed})" if closed is not None else "(@)"

        def open_all(s: Session, p: list[str]) -> None:
            none(p)
            self.state.set_closed(None)

        def open_(s: Session, p: list[str]) -> None:
            channels = self.channels(one(p, "channel list"))
            if self.state.closed in channels:
                self.state.set_closed(None)

        def open_query(s: Session, p: list[str]) -> str:
            channels = self.channels(one(p, "channel list"))
            closed = self.state.closed
            return ",".join("0" if ch == closed else "1" for ch in channels)

        tree.add("ROUTe:CLOSe", set=close, query=close_query)
        tree.add("ROUTe:CLOSe:STATe", query=state_query)
        tree.add("ROUTe:OPEN:ALL", set=open_all)
        tree.add("ROUTe:OPEN", set=open_, query=open_query)
