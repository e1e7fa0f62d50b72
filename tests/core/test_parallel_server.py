"""The workers' server started ahead of the first pool (a run's session start)."""

from __future__ import annotations

import threading

from bench.parallel import ordered_map, start_server


def negate(x: int) -> int:
    return -x


def test_server_started_early_serves_the_pools_after_it():
    stop = threading.Event()
    thread = threading.Thread(target=stop.wait, daemon=True)
    thread.start()
    try:
        # A process with threads forks its workers from a server: started now, it imports
        # while the caller goes on, and later maps use it.
        assert start_server(("bench.units",)) is True
        assert start_server() is True  # already running: nothing more to start
        out = list(ordered_map(negate, range(5), jobs=2))
    finally:
        stop.set()
        thread.join()
    assert out == [0, -1, -2, -3, -4]


def test_a_started_map_gives_its_results_in_order_later():
    from bench.parallel import start_map

    started = start_map(negate, range(6), jobs=2)
    assert list(started.results()) == [0, -1, -2, -3, -4, -5]
    serial = start_map(negate, [3], jobs=2)  # one item: run by results(), here
    assert list(serial.results()) == [-3]


def test_a_started_map_can_be_cancelled_unread():
    from bench.parallel import start_map

    started = start_map(negate, range(40), jobs=2)
    started.cancel()  # the workers stop; nothing is left running
    assert started.done()
    started.cancel()  # twice is harmless
    assert started.done()


def test_a_runs_workers_server_imports_what_the_figures_draw_with(monkeypatch):
    # The report's text is made without matplotlib (bench.report_sample names its
    # figures); the server the figure workers are forked from must import it, or each
    # worker would at its first figure.
    import bench.parallel as parallel
    from bench.procedure.plan_types import Step
    from bench.procedure.runner import Runner

    asked: list[tuple[str, ...]] = []
    monkeypatch.setattr(parallel, "available_cores", lambda: 2)
    monkeypatch.setattr(parallel, "start_server", lambda modules=(): asked.append(modules) or True)
    assert Runner._start_workers([Step(id="fit", kind="fit"), Step(id="report", kind="report")])
    assert {"bench.plots", "bench.report_sample"} <= set(asked[-1])
    assert Runner._start_workers([Step(id="fit", kind="fit")])
    assert "bench.plots" not in asked[-1]
