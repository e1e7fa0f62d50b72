"""``zbench run --sim --manual``: a rehearsal of a guided session. The person at the
terminal answers every prompt; the simulated hands act only on what was confirmed."""

from __future__ import annotations

import json

import pytest
from click.testing import CliRunner

from bench.cli import cli, main
from bench.procedure.operators import (
    PHYSICAL_ACTIONS,
    ConsoleOperator,
    OperatorStop,
    RehearsalOperator,
)

TINY = """\
name: tiny
mode: guided
instruments:
  analyzer: {max_power: 0 dBm, timeout: 2 s}
  switch: {timeout: 1 s}
  bench: {timeout: 1 s}
sweep: {start: 100 Hz, stop: 100 MHz, points: 21, if_bandwidth: 1 kHz, power: 0 dBm}
fixture: {positions: 8, use_positions: [1], isolation_transformer: true}
calibration: {method: through}
parts:
  - {name: MC22-6V3, kind: mlcc, nominal: 22u, tolerance: 20 %, samples: 1}
steps: [calibrate, measure]
"""


class _Hands:
    """Stands in for the simulated hands: records what it was made to do."""

    def __init__(self):
        self.done: list[str] = []

    def __getattr__(self, name):
        return lambda *args: self.done.append(name)


def test_the_hands_act_only_on_a_confirmed_prompt():
    answers = iter(["", "forget", "stop"])
    hands = _Hands()
    person = RehearsalOperator(hands, ask=lambda prompt: next(answers), say=lambda text: None)
    person.fit_transformer(True)
    person.connect_standard("through")  # Enter: the set-up and the through are done
    assert hands.done == ["fit_transformer", "connect_standard"]
    person.connect_fixture()  # 'forget': confirmed, but the hands do nothing
    assert hands.done == ["fit_transformer", "connect_standard"]
    with pytest.raises(OperatorStop):
        person.strap_mounts([1])
    assert "strap_mounts" not in hands.done
    # Every physical action the runner can ask for is rehearsed, including new ones.
    assert {"connect_standard", "load_parts", "fill_mount"} <= set(PHYSICAL_ACTIONS)
    for name in PHYSICAL_ACTIONS:
        assert getattr(RehearsalOperator, name) is not getattr(ConsoleOperator, name), name


def test_a_forgotten_through_is_caught_and_repeated(tmp_path):
    proc = tmp_path / "tiny.yaml"
    proc.write_text(TINY, encoding="utf-8")
    answers = [
        "forget",  # the through: confirmed, but the cable ends stay apart
        "r",  # the plausibility check says so: repeat
        "",  # the through, now fitted by the simulated hands
        "",  # calibration through: continue
        "",  # cables to the fixture
        "",  # the sample placed
        "",  # its result: continue
    ]
    args = ["run", str(proc), "--sim", "--manual", "--time-scale", "0.01", "--quiet"]
    result = CliRunner().invoke(
        cli, [*args, "--out", str(tmp_path / "runs")], input="\n".join(answers) + "\n"
    )
    assert result.exit_code == 0, result.output
    out = result.output
    assert "'forget'" in out and "the simulated hands did nothing" in out
    first, _, rest = out.partition("IMPLAUSIBLE: the through reads")
    assert "simulated hands: cables" not in first.split("THROUGH adapter")[-1]
    assert "simulated hands: cables: the two cable ends joined with the THROUGH adapter" in rest
    (manifest_path,) = (tmp_path / "runs").glob("*-tiny/manifest.json")
    manifest = json.loads(manifest_path.read_text(encoding="utf-8"))
    assert manifest["state"] == "complete"
    assert manifest["simulated"]["manual"] is True
    assert not any(w.startswith("implausible") for w in manifest.get("warnings", []))
    # The estimate allowed the person the prompts this session asked for, less the repeat:
    # the through and the fixture connected, one sample placed, two results answered.
    (timing,) = manifest["timing"]
    est = timing["estimated"]
    assert (est["connections"], est["fittings"], est["decisions"]) == (2, 1, 2)
    assert est["operator"] > 0 and timing["measured"]["operator"] > 0
    log = (manifest_path.parent / "log").read_text(encoding="utf-8")
    assert "calibrate/through: sweep repeated at the operator's request" in log


def test_manual_goes_with_sim(tmp_path, capsys):
    proc = tmp_path / "tiny.yaml"
    proc.write_text(TINY, encoding="utf-8")
    assert main(["run", str(proc), "--manual", "--out", str(tmp_path / "runs")]) == 2
    assert "--manual goes with --sim" in capsys.readouterr().err
    assert not list((tmp_path / "runs").glob("*-tiny"))
