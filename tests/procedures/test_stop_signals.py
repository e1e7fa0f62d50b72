"""Signals that stop a run (bench.stop_signals): SIGTERM and SIGHUP stop it as Ctrl-C
does, only the first signal interrupts, an ignored signal stays ignored, and the previous
handlers come back."""

from __future__ import annotations

import os
import signal
import threading
import time

import pytest

from bench.stop_signals import Stopped, reason, stop_on_signals

# Each test starts from a terminal session's handlers (tests/conftest.py), whatever the
# test run inherited.
pytestmark = pytest.mark.usefixtures("default_signals")


def _deliver(signum: int) -> None:
    """Send ``signum`` to this process and give the main thread time to handle it."""
    os.kill(os.getpid(), signum)
    for _ in range(100):  # the handler runs at the next bytecode boundary
        time.sleep(0.01)


@pytest.mark.parametrize("signum", [signal.SIGTERM, signal.SIGHUP], ids=["SIGTERM", "SIGHUP"])
def test_termination_and_hang_up_stop_as_ctrl_c_does(signum):
    with pytest.raises(KeyboardInterrupt) as info, stop_on_signals():
        _deliver(signum)
    assert isinstance(info.value, Stopped)
    assert info.value.signum == signum
    assert reason(info.value).startswith(f"stopped by {signal.Signals(signum).name} (")
    assert signal.getsignal(signum) is signal.SIG_DFL


def test_ctrl_c_is_a_plain_keyboard_interrupt():
    with pytest.raises(KeyboardInterrupt) as info, stop_on_signals():
        _deliver(signal.SIGINT)
    assert not isinstance(info.value, Stopped)
    assert reason(info.value) == "interrupted (Ctrl-C)"
    assert signal.getsignal(signal.SIGINT) is signal.default_int_handler


def test_later_signals_do_not_interrupt_the_stop(capfd):
    # A second Ctrl-C pressed while the first one's stop ramps the bias down must not cut
    # the ramp-down short: it is told why and otherwise ignored.
    ramped_down = False
    with stop_on_signals():
        try:
            _deliver(signal.SIGINT)
        except KeyboardInterrupt:
            _deliver(signal.SIGINT)
            _deliver(signal.SIGTERM)
            ramped_down = True
    assert ramped_down
    err = capfd.readouterr().err
    assert "SIGINT ignored: the run is stopping" in err
    assert "SIGTERM ignored: the run is stopping" in err
    assert "DC bias" in err


def test_a_signal_the_process_started_ignoring_stays_ignored():
    # nohup starts a process with SIGHUP ignored: that choice holds during a run.
    previous = signal.signal(signal.SIGHUP, signal.SIG_IGN)
    try:
        with stop_on_signals():
            assert signal.getsignal(signal.SIGHUP) is signal.SIG_IGN
            _deliver(signal.SIGHUP)  # nothing happens
        assert signal.getsignal(signal.SIGHUP) is signal.SIG_IGN
    finally:
        signal.signal(signal.SIGHUP, previous)


def test_outside_the_main_thread_nothing_is_changed():
    seen = []

    def body():
        with stop_on_signals():
            seen.append(signal.getsignal(signal.SIGTERM))

    before = signal.getsignal(signal.SIGTERM)
    thread = threading.Thread(target=body)
    thread.start()
    thread.join()
    assert seen == [before]
