"""Points the analyser could not measure (a receiver overload, say) come as SCPI's
not-a-number, 9.91E37 (SCPI-99 vol. 1, from memory): read as numbers they would pass
for a measurement of 10³⁷. The simulated analyser sends them (``analyzer.unmeasured``)
over its socket as a real one would; the run must stop with what happened and the fix,
and keep every stored sweep; files holding them are refused with the same reason.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
import yaml
from click.testing import CliRunner

from bench.cli import cli
from bench.errors import InputError, RunError
from bench.touchstone import load_measurement
from drivers.scpi import scpi_non_numbers

PROCEDURE = Path(__file__).resolve().parents[2] / "procedures" / "demo.yaml"


def test_scpi_codes_read_as_no_number():
    values = np.array([1.5, 9.91e37, 9.9e37, -9.9e37, float(np.float32(9.91e37)), 9.8e37])
    out = scpi_non_numbers(values)
    assert out[0] == 1.5 and out[5] == 9.8e37  # a number near the codes stays a number
    assert np.isnan(out[1]) and np.isnan(out[4])  # a 32-bit block carries the code too
    assert out[2] == np.inf and out[3] == -np.inf


def test_a_run_stops_on_points_the_analyser_could_not_measure(tmp_path: Path):
    scenario = tmp_path / "overload.yaml"
    scenario.write_text(
        yaml.safe_dump(
            {
                "name": "overload",
                "extends": "demo",
                "description": "The demo bench; one point in 100 not measured.",
                "analyzer": {"unmeasured": {"rate": 0.01}},
            }
        ),
        encoding="utf-8",
    )
    data = yaml.safe_load(PROCEDURE.read_text(encoding="utf-8"))
    data["parts"] = data["parts"][:1]
    procedure = tmp_path / "one.yaml"
    procedure.write_text(yaml.safe_dump(data, sort_keys=False), encoding="utf-8")
    args = ["run", str(procedure), "--sim", str(scenario), "--yes", "--quiet"]
    result = CliRunner().invoke(cli, [*args, "--time-scale", "0.005", "--out", str(tmp_path)])
    # The command's own wrapper prints this error (exit 1); the test runner hands it back.
    assert isinstance(result.exception, RunError)
    text = str(result.exception)
    assert "sent no number (SCPI's 9.91E37" in text and "lower the source power" in text
    assert "the run is kept" in text and "--resume" in text
    kept = Path(text.split("the run is kept in ")[1].split(";")[0])
    assert (kept / "manifest.json").is_file()


def test_a_file_with_scpi_codes_is_refused_for_them(tmp_path: Path):
    f = np.geomspace(1e3, 1e8, 20)
    rows = [f"{x:g} 0.5 0 0.5 0 0.5 0 0.5 0" for x in f]
    rows[7] = f"{f[7]:g} 9.91E+37 9.91E+37 9.91E+37 9.91E+37 9.91E+37 9.91E+37 9.91E+37 9.91E+37"
    path = tmp_path / "overload.s2p"
    path.write_text("# Hz S RI R 50\n" + "\n".join(rows) + "\n", encoding="utf-8")
    with pytest.raises(InputError) as info:
        load_measurement(path)
    text = str(info.value)
    assert "9.91E37" in text and "1 frequencies" in text and "holds values up to" not in text
    csv = tmp_path / "overload.csv"
    csv.write_text(
        "Frequency [Hz],|Z| [Ohm],Phase [deg]\n"
        + "".join(f"{x:g},{9.91e37 if i == 3 else 1.0},-45\n" for i, x in enumerate(f)),
        encoding="utf-8",
    )
    with pytest.raises(InputError, match=r"9\.91E37"):
        load_measurement(csv)
