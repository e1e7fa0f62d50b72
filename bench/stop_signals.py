"""Signals that stop a run: Ctrl-C, a termination request and a closed terminal all stop
it the same way, and no later signal cuts short the switching-off that follows.

By default a termination request (``kill``, a scheduler or service manager stopping the
job: SIGTERM) or a closed terminal (SIGHUP) ends a Python process at once, without
running any clean-up: a run holding DC bias on a capacitor would leave the source's
output on and the part charged. And a second Ctrl-C, pressed while the first one's stop
ramps the bias down, would interrupt the ramp-down itself. While :func:`stop_on_signals`
is active:

- SIGINT raises :class:`KeyboardInterrupt` and SIGTERM and SIGHUP raise :class:`Stopped`
  (a kind of KeyboardInterrupt) in the main thread, the first time only: the run then
  stops as it does on Ctrl-C (bias ramped down and switched off, discharge waited, the
  run left resumable);
- every later one of them is noted on stderr and otherwise ignored until the stop is
  over: the clean-up's instrument calls end within their VISA time-outs;
- a signal that the process was started ignoring (SIGHUP under ``nohup``, SIGINT in a
  background job of a script) stays ignored.

SIGKILL cannot be caught, and power loss leaves the output as it was: the DC source's own
protection and the bench's rules apply then.
"""

from __future__ import annotations

import contextlib
import os
import signal
import threading
from collections.abc import Iterator
from typing import Any

#: What each signal means to a person reading the stop reason.
MEANING = {
    signal.SIGINT: "Ctrl-C",
    signal.SIGTERM: "a termination request",
}
if hasattr(signal, "SIGHUP"):  # not on Windows
    MEANING[signal.SIGHUP] = "the terminal was closed"


class Stopped(KeyboardInterrupt):
    """Raised in the main thread by SIGTERM or SIGHUP under :func:`stop_on_signals`."""

    def __init__(self, signum: int):
        self.signum = signum
        super().__init__(f"{signal.Signals(signum).name} ({MEANING.get(signum, 'a signal')})")


def reason(exc: KeyboardInterrupt) -> str:
    """How a run was interrupted, for its log and the console."""
    if isinstance(exc, Stopped):
        return f"stopped by {exc}"
    return "interrupted (Ctrl-C)"


#: What a signal after the first is told during a run's stop.
RUN_STOPPING = "the run is stopping (the DC bias is being ramped down and switched off first)"


@contextlib.contextmanager
def stop_on_signals(stopping: str = RUN_STOPPING) -> Iterator[None]:
    """Inside: SIGINT, SIGTERM and SIGHUP stop the caller once (see the module's text);
    a later one is answered on stderr with ``stopping``. The previous handlers are
    restored on leaving. Does nothing outside the main thread, where signal handlers
    cannot be set."""
    if threading.current_thread() is not threading.main_thread():
        yield
        return
    first = True

    def handler(signum: int, frame: Any) -> None:
        nonlocal first
        if not first:
            # Straight to the file descriptor: the main thread may be inside a write to
            # sys.stderr, and a buffered write from here would then raise instead.
            with contextlib.suppress(OSError):
                os.write(2, f"zbench: {signal.Signals(signum).name} ignored: {stopping}\n".encode())
            return
        first = False
        if signum == signal.SIGINT:
            raise KeyboardInterrupt
        raise Stopped(signum)

    previous: dict[int, Any] = {}
    try:
        for signum in MEANING:
            current = signal.getsignal(signum)
            if current is signal.SIG_IGN:
                continue  # started ignoring it (nohup, a background job): keep it so
            # None: a handler set outside Python; the default is what it stands for.
            previous[signum] = signal.SIG_DFL if current is None else current
            signal.signal(signum, handler)
        yield
    finally:
        for signum, old in previous.items():
            signal.signal(signum, old)
