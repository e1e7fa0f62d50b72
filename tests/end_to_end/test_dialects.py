"""One lean run on each analyser dialect the simulator speaks, over real sockets: the
same bench, measured through two different command maps, gives the same part."""

from __future__ import annotations

import pytest

from simulated_instruments.server import start_bench

LEAN = """\
name: lean_{dialect}
mode: unattended
instruments:
  analyzer: {{command_map: {dialect}, max_power: 0 dBm, timeout: 2 s}}
  switch: {{timeout: 1 s}}
  bench: {{timeout: 1 s}}
sweep: {{start: 1 kHz, stop: 50 MHz, points: 41, if_bandwidth: 1 kHz, power: 0 dBm}}
fixture:
  positions: 8
  isolation_transformer: true
calibration: {{method: through}}
parts:
  - {{name: MC22-6V3, kind: mlcc, nominal: 22u, tolerance: 20 %, rated_voltage: 6.3 V,
     samples: 1}}
steps: [calibrate, mount_short, measure, fit]
"""

SCENARIO = {"default": "demo", "meas_stim": "demo_meas_stim"}


def test_each_dialect_runs_and_measures_the_same_part(tmp_path, kit):
    results = {}
    for dialect, scenario in SCENARIO.items():
        bench = start_bench(scenario, time_scale=kit.TIME_SCALE, seed=7)
        try:
            plan, store = kit.start_run(tmp_path / dialect, LEAN.format(dialect=dialect))
            runner = kit.run_on(bench, plan, store)
        finally:
            bench.stop()
        assert store.manifest["state"] == "complete"
        assert store.manifest["instruments"]["analyzer"]["command_map"] == dialect
        (sample,) = runner.summary.samples
        assert sample.fit is not None, sample.fit_error
        results[dialect] = sample.fit.landmarks["c_low"]
        assert results[dialect] == pytest.approx(22e-6, rel=0.2)
    # Same truth, same noise stream: only the transfer differs (4-byte floats and a
    # computed frequency grid in meas_stim): 4-byte floats carry about 6e-8 of a value.
    assert results["meas_stim"] == pytest.approx(results["default"], rel=1e-5)
