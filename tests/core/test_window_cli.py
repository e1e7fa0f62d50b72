"""``zbench window`` through the real command-line entry point."""

from __future__ import annotations

import json

import pytest

from bench.cli import main


def test_json_for_a_plain_50_ohm_set_up(capsys: pytest.CaptureFixture[str]) -> None:
    assert main(["window", "--json"]) == 0
    data = json.loads(capsys.readouterr().out)
    for key in ("z_min", "z_max", "z0", "series_r", "noise_floor_db", "tolerance"):
        assert key in data
    assert data["z0"] == 50.0 and data["series_r"] == 0.0
    # Common practice, no single source (docs/references.md §1): about 1 mΩ to about 225 Ω.
    assert 1e-3 / 3 < data["z_min"] < 3e-3
    assert 150 < data["z_max"] < 260


def test_si_prefixed_values_and_the_549_over_50_scaling(
    capsys: pytest.CaptureFixture[str],
) -> None:
    assert main(["window", "--json"]) == 0
    plain = json.loads(capsys.readouterr().out)
    assert main(["window", "--series-r", "0.499k", "--z0", "50 ohm", "--json"]) == 0
    scaled = json.loads(capsys.readouterr().out)
    assert scaled["series_r"] == pytest.approx(499.0)
    # Derived (docs/references.md §1): (50 + 499)/50 = 10.98.
    assert scaled["z_min"] / plain["z_min"] == pytest.approx(10.98, rel=1e-6)
    assert scaled["z_max"] / plain["z_max"] == pytest.approx(10.98, rel=1e-6)


def test_tolerance_as_percentage_and_noise_floor_in_db(
    capsys: pytest.CaptureFixture[str],
) -> None:
    assert main(["window", "--tolerance", "25%", "--noise-floor", "-110 dB", "--json"]) == 0
    data = json.loads(capsys.readouterr().out)
    assert data["tolerance"] == pytest.approx(0.25)
    assert data["noise_floor_db"] == pytest.approx(-110.0)


def test_table_uses_si_prefixes(capsys: pytest.CaptureFixture[str]) -> None:
    assert main(["window", "--series-r", "499"]) == 0
    out = capsys.readouterr().out
    assert "lowest impedance" in out and "highest impedance" in out
    assert "mΩ" in out and "kΩ" in out
    assert "Ze = 549 Ω" in out


@pytest.mark.parametrize(
    ("args", "text"),
    [
        (["--tolerance", "abc"], "--tolerance"),
        (["--tolerance", "2"], "tolerance"),
        (["--z0", "0"], "z0"),
        (["--series-r", "-3"], "series_r"),
        (["--noise-floor", "5"], "noise_floor_db"),
        (["--z0", "50 Hz"], "--z0"),
    ],
)
def test_bad_values_exit_2_with_a_message(
    capsys: pytest.CaptureFixture[str], args: list[str], text: str
) -> None:
    assert main(["window", *args]) == 2
    captured = capsys.readouterr()
    assert text in captured.err
    assert "fix:" in captured.err
    assert "Traceback" not in captured.err


def test_method_option_prints_each_window(capsys: pytest.CaptureFixture[str]) -> None:
    # docs/references.md §9 [derived]: series-through floor about 13 Ω at 50 Ω, 0.1 dB.
    assert main(["window", "--method", "series-through", "--json"]) == 0
    series = json.loads(capsys.readouterr().out)
    assert series["method"] == "series-through" and 12.5 < series["z_min"] < 14.5
    assert main(["window", "--method", "reflection"]) == 0
    text = capsys.readouterr().out
    assert "reflection" in text and "|dΓ| = 0.005" in text
    assert main(["window", "--method", "all", "--json"]) == 0
    methods = [w["method"] for w in json.loads(capsys.readouterr().out)]
    assert methods == ["shunt-through", "series-through", "reflection"]


def test_unknown_method_is_bad_input(capsys: pytest.CaptureFixture[str]) -> None:
    assert main(["window", "--method", "bridge"]) == 2
    assert "choose one of" in capsys.readouterr().err
