"""Points the analyser could not measure (a receiver overload, say) come as SCPI's
not-a-number, 9.91E37 (SCPI-99 vol. 1, from memory): read as numbers they would pass
for a measurement of 10³⁷. The simulated analyser sends them (``analyzer.unmeasured``)
over its socket as a real one would; a run takes such a sweep again (an overload that
passes costs a sweep), and when it persists stops with what happened and the fix,
keeping every stored sweep; files holding them are refused with the same reason.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
import yaml
from click.testing import CliRunner, Result

from bench.cli import cli
from bench.errors import InputError, RunError
from bench.procedure.steps.sweep import UNMEASURED_SWEEPS
from bench.touchstone import load_measurement
from drivers.scpi import scpi_non_numbers
from simulated_instruments.physics import add_unmeasured

PROCEDURE = Path(__file__).resolve().parents[2] / "procedures" / "demo.yaml"


def test_scpi_codes_read_as_no_number():
    values = np.array([1.5, 9.91e37, 9.9e37, -9.9e37, float(np.float32(9.91e37)), 9.8e37])
    out = scpi_non_numbers(values)
    assert out[0] == 1.5 and out[5] == 9.8e37  # a number near the codes stays a number
    assert np.isnan(out[1]) and np.isnan(out[4])  # a 32-bit block carries the code too
    assert out[2] == np.inf and out[3] == -np.inf


def _run_one_part(tmp_path: Path, unmeasured: dict) -> Result:
    """The demo's first part run unattended on the demo bench whose analyser leaves
    points unmeasured as ``unmeasured`` says (seed fixed)."""
    scenario = tmp_path / "overload.yaml"
    scenario.write_text(
        yaml.safe_dump(
            {
                "name": "overload",
                "extends": "demo",
                "description": "The demo bench with points the analyser cannot measure.",
                "analyzer": {"unmeasured": unmeasured},
            }
        ),
        encoding="utf-8",
    )
    data = yaml.safe_load(PROCEDURE.read_text(encoding="utf-8"))
    data["parts"] = data["parts"][:1]
    procedure = tmp_path / "one.yaml"
    procedure.write_text(yaml.safe_dump(data, sort_keys=False), encoding="utf-8")
    args = ["run", str(procedure), "--sim", str(scenario), "--yes", "--quiet", "--seed", "7"]
    return CliRunner().invoke(cli, [*args, "--time-scale", "0.005", "--out", str(tmp_path)])


def test_a_run_stops_on_points_the_analyser_keeps_failing_to_measure(tmp_path: Path):
    # One point in 20 of every sweep: no sweep of a few hundred points comes out whole.
    result = _run_one_part(tmp_path, {"rate": 0.05})
    # The command's own wrapper prints this error (exit 1); the test runner hands it back.
    assert isinstance(result.exception, RunError)
    text = str(result.exception)
    assert "sent no number (SCPI's 9.91E37" in text and "lower the source power" in text
    assert f"each of {UNMEASURED_SWEEPS} sweeps in a row had such points" in text
    assert "the run is kept" in text and "--resume" in text
    kept = Path(text.split("the run is kept in ")[1].split(";")[0])
    assert (kept / "manifest.json").is_file()
    log = (kept / "log").read_text(encoding="utf-8")
    assert log.count("sweep taken again") == UNMEASURED_SWEEPS - 1


def test_an_overload_that_passes_costs_a_sweep_not_the_run(tmp_path: Path):
    # One sweep in five has points not measured: each is taken again, the run completes.
    result = _run_one_part(tmp_path, {"rate": 0.05, "sweep_rate": 0.2})
    assert result.exit_code in (0, 3), result.output
    (run,) = [p for p in tmp_path.iterdir() if p.name.endswith("-demo") and not p.is_symlink()]
    log = (run / "log").read_text(encoding="utf-8")
    assert "sweep taken again" in log and "run complete" in log
    # What was stored holds numbers only: the sweeps with holes were not kept.
    for raw in (run / "raw").iterdir():
        assert np.all(np.isfinite(load_measurement(raw).s))


def test_the_simulated_overload_hits_the_share_of_sweeps_asked_for():
    rng = np.random.default_rng(1)
    s = np.ones((200, 2, 2), dtype=complex)
    hit = [bool(np.isnan(add_unmeasured(s, rng, 0.05, 0.2)).any()) for _ in range(2000)]
    # 0.2 of the sweeps, each with 1 − 0.95^200 ≈ 1 chance of a point (derived): about
    # 400 of 2000, a binomial spread of ±18 (derived); 5 sigma allowed.
    assert abs(sum(hit) - 400) < 90
    assert not np.isnan(add_unmeasured(s, rng, 0.0, 1.0)).any()


def test_a_file_with_scpi_codes_is_refused_for_them(tmp_path: Path):
    f = np.geomspace(1e3, 1e8, 20)
    rows = [f"{x:g} 0.5 0 0.5 0 0.5 0 0.5 0" for x in f]
    rows[7] = f"{f[7]:g} 9.91E+37 9.91E+37 9.91E+37 9.91E+37 9.91E+37 9.91E+37 9.91E+37 9.91E+37"
    path = tmp_path / "overload.s2p"
    path.write_text("# Hz S RI R 50\n" + "\n".join(rows) + "\n", encoding="utf-8")
    with pytest.raises(InputError) as info:
        load_measurement(path)
    text = str(info.value)
    assert "9.91E37" in text and "at 1 frequency (" in text and "holds values up to" not in text
    csv = tmp_path / "overload.csv"
    csv.write_text(
        "Frequency [Hz],|Z| [Ohm],Phase [deg]\n"
        + "".join(f"{x:g},{9.91e37 if i == 3 else 1.0},-45\n" for i, x in enumerate(f)),
        encoding="utf-8",
    )
    with pytest.raises(InputError, match=r"9\.91E37"):
        load_measurement(csv)
