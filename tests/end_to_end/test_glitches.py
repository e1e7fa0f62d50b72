"""A rehearsal on an analyser that glitches (scenario ``demo_glitches``): one point in
250 of every sweep, calibration standards and mount shorts included, comes back off by
35 % or 17°. The run must give the parts the clean bench gives, say which points it
left out, and show them in its report.

The tolerances are the recovery targets of ``test_accuracy.py`` (the project's own,
common practice, no source), here against the same run on the clean bench with the same
seed: the same parts, the same noise, only the glitches added.
"""

from __future__ import annotations

import csv
import json
from pathlib import Path

import pytest
import yaml
from click.testing import CliRunner

from bench.cli import cli

PROCEDURE = Path(__file__).resolve().parents[2] / "procedures" / "demo.yaml"
KEEP = ("MC22-6V3", "PL530N", "FB239")


def _lean(tmp: Path) -> Path:
    """The demo procedure with a capacitor and the two stitched inductive parts."""
    data = yaml.safe_load(PROCEDURE.read_text(encoding="utf-8"))
    data["parts"] = [p for p in data["parts"] if p["name"] in KEEP]
    data["parts"][0]["samples"] = 2
    path = tmp / "lean.yaml"
    path.write_text(yaml.safe_dump(data, sort_keys=False), encoding="utf-8")
    return path


def _run(tmp: Path, scenario: str, seed: int | None) -> Path:
    args = ["run", str(_lean(tmp)), "--sim", scenario, "--yes", "--quiet"]
    args += [] if seed is None else ["--seed", str(seed)]
    args += ["--time-scale", "0.005", "--out", str(tmp / scenario)]
    result = CliRunner().invoke(cli, args)
    assert result.exit_code == 0, result.output + repr(result.exception)
    line = next(x for x in result.output.splitlines() if x.startswith("run folder: "))
    return Path(line.removeprefix("run folder: "))


def _rows(root: Path) -> dict[str, dict[str, str]]:
    rows = csv.DictReader((root / "summary.csv").read_text(encoding="utf-8").splitlines())
    return {f"{r['part']}/{r['sample']}": r for r in rows}


# The scenario's own seed, and two that put glitches where they once misled the fit:
# a lone glitch far below the band with only noise beside it (2), and one left alone
# once a glitch beside it was screened out (3).
@pytest.fixture(scope="module", params=[None, 2, 3], ids=["own-seed", "seed-2", "seed-3"])
def runs(request, tmp_path_factory):
    tmp = tmp_path_factory.mktemp("glitches")
    return _run(tmp, "demo", request.param), _run(tmp, "demo_glitches", request.param)


def _close(glitched: str, clean: str, rel: float, what: str) -> None:
    assert float(glitched) == pytest.approx(float(clean), rel=rel), what


def test_a_glitching_analyser_gives_the_parts_the_clean_one_gives(runs):
    clean, glitched = (_rows(root) for root in runs)
    assert clean.keys() == glitched.keys()
    for name, row in glitched.items():
        assert row["kind"] == clean[name]["kind"], name
        assert row["model"] == clean[name]["model"], name
        if row["kind"] == "mlcc":
            _close(row["c_low [F]"], clean[name]["c_low [F]"], 0.02, f"{name} c_low")
            _close(row["esl [H]"], clean[name]["esl [H]"], 0.05, f"{name} esl")
            _close(row["srf [Hz]"], clean[name]["srf [Hz]"], 0.03, f"{name} srf")
        else:
            _close(row["l_low [H]"], clean[name]["l_low [H]"], 0.03, f"{name} l_low")
            _close(row["srf [Hz]"], clean[name]["srf [Hz]"], 0.03, f"{name} srf")
        assert row["result"] == clean[name]["result"], name


def test_the_points_left_out_are_named_and_shown(runs):
    _, root = runs
    screened = {}
    for path in sorted((root / "models").glob("*.fit.json")):
        record = json.loads(path.read_text(encoding="utf-8"))
        reasons = {e["reason"] for e in record["excluded"]}
        screened[path.name] = reasons & {"glitch", "isolated", "negative-resistance"}
    assert any(screened.values()), screened
    report = (root / "report.html").read_text(encoding="utf-8")
    assert "open circles: points the fit screened out" in report
