"""Fault injection: what can go wrong between a bench computer and its instruments.

Faults are set in the scenario (``faults:``) or at run time with the ``FAULt`` nodes of
the bench-control port (see ``simulated_instruments/README.md``). They act on one
instrument's connections:

- ``delay``: the next ``count`` answers (0: every answer until cleared) wait ``seconds``
  of real time before they are sent, to push a client past its timeout;
- ``drop``: after ``after`` more queries have been answered, the connection that sends
  the next query is closed without an answer;
- ``corrupt_block``: the next ``count`` binary blocks go out with a broken header;
- ``error``: an entry is pushed into the error queue of every open session of the
  instrument (or of the next one to connect, if none is open);
- ``missing``: the part placed in ``position`` is not there (the mount is empty), while
  the operator still believes it is.
"""

from __future__ import annotations

import threading
from dataclasses import dataclass, field

INSTRUMENTS = ("analyzer", "switch", "dc_source", "bench", "gain_phase")


@dataclass
class FaultState:
    """Active faults, shared by the instruments of one bench; thread-safe."""

    delays: dict[str, tuple[float, int]] = field(default_factory=dict)
    drops: dict[str, int] = field(default_factory=dict)
    corrupt_blocks: dict[str, int] = field(default_factory=dict)
    pending_errors: dict[str, list[tuple[int, str]]] = field(default_factory=dict)
    missing: set[int] = field(default_factory=set)
    _lock: threading.Lock = field(default_factory=threading.Lock)

    def clear(self) -> None:
        with self._lock:
            self.delays.clear()
            self.drops.clear()
            self.corrupt_blocks.clear()
            self.pending_errors.clear()
            self.missing.clear()

    def set_delay(self, instrument: str, seconds: float, count: int = 1) -> None:
        with self._lock:
            if seconds <= 0:
                self.delays.pop(instrument, None)
            else:
                self.delays[instrument] = (seconds, count)

    def take_delay(self, instrument: str) -> float:
        """Seconds to wait before the next answer of ``instrument`` (0 for none)."""
        with self._lock:
            if instrument not in self.delays:
                return 0.0
            seconds, count = self.delays[instrument]
            if count == 1:
                del self.delays[instrument]
            elif count > 1:
                self.delays[instrument] = (seconds, count - 1)
            return seconds

    def set_drop(self, instrument: str, after: int) -> None:
        with self._lock:
            if after < 0:
                self.drops.pop(instrument, None)
            else:
                self.drops[instrument] = after

    def take_drop(self, instrument: str) -> bool:
        """Count one query of ``instrument``; True when its connection must be dropped."""
        with self._lock:
            if instrument not in self.drops:
                return False
            left = self.drops[instrument]
            if left <= 0:
                del self.drops[instrument]
                return True
            self.drops[instrument] = left - 1
            return False

    def set_corrupt_blocks(self, instrument: str, count: int) -> None:
        with self._lock:
            if count <= 0:
                self.corrupt_blocks.pop(instrument, None)
            else:
                self.corrupt_blocks[instrument] = count

    def take_corrupt_block(self, instrument: str) -> bool:
        with self._lock:
            left = self.corrupt_blocks.get(instrument, 0)
            if left <= 0:
                return False
            if left == 1:
                del self.corrupt_blocks[instrument]
            else:
                self.corrupt_blocks[instrument] = left - 1
            return True

    def add_pending_error(self, instrument: str, code: int, text: str) -> None:
        with self._lock:
            self.pending_errors.setdefault(instrument, []).append((code, text))

    def take_pending_errors(self, instrument: str) -> list[tuple[int, str]]:
        with self._lock:
            return self.pending_errors.pop(instrument, [])

    def set_missing(self, position: int, missing: bool) -> None:
        with self._lock:
            if missing:
                self.missing.add(position)
            else:
                self.missing.discard(position)

    def is_missing(self, position: int) -> bool:
        with self._lock:
            return position in self.missing

    def describe(self) -> str:
        """One line listing the active faults, for ``FAULt:LIST?``."""
        with self._lock:
            items = [f"delay {k} {s:g}s x{c}" for k, (s, c) in sorted(self.delays.items())]
            items += [f"drop {k} after {n}" for k, n in sorted(self.drops.items())]
            items += [f"corrupt_block {k} x{n}" for k, n in sorted(self.corrupt_blocks.items())]
            items += [
                f"error {k} {code}"
                for k, errs in sorted(self.pending_errors.items())
                for code, _ in errs
            ]
            items += [f"missing {p}" for p in sorted(self.missing)]
        return "; ".join(items)


def corrupt_block_header(data: bytes) -> bytes:
    """Break the definite-length header of the first block in ``data``: the last digit
    of its length becomes ``X``, as a garbled byte on the line would leave it. A reader
    cannot tell where the block ends; the bytes after it stay in the connection."""
    index = data.find(b"#")
    if index < 0 or index + 2 >= len(data) or not data[index + 1 : index + 2].isdigit():
        return data
    digits = int(data[index + 1 : index + 2])
    if digits == 0:
        return data
    last = index + 1 + digits
    return data[:last] + b"X" + data[last + 1 :]
