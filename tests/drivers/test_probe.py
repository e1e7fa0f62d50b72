"""zbench probe against the simulated analyser in both dialects, and against a map with
deliberate mistakes: every wrong entry is named, with the instrument's own error."""

from __future__ import annotations

import copy

import pytest
import yaml
from click.testing import CliRunner

from bench.cli import cli
from drivers.command_map import MAPS_DIR, load_command_map
from drivers.probe import probe
from drivers.transport import VisaTransport


def run_probe(*args: str) -> tuple[int, str]:
    result = CliRunner().invoke(cli, ["probe", *args, "--timeout", "0.3"])
    assert result.exception is None or isinstance(result.exception, SystemExit), repr(
        result.exception
    )
    return result.exit_code, result.output


def lines_with(output: str, status: str) -> list[str]:
    return [line for line in output.splitlines() if line.startswith(status)]


def test_probe_meas_stim_with_its_map_passes(sim_bench_factory):
    bench = sim_bench_factory("demo_meas_stim")
    code, out = run_probe(bench.resources["analyzer"], "--map", "meas_stim", "--sweep")
    assert code == 0, out
    assert lines_with(out, "FAIL") == []
    assert "SIM-VNA-0002" in out
    # polled sync, numbered traces and 4-byte floats all worked in the short sweep
    assert out.count("sync by poll") == 4
    assert "frequencies are computed" in out


def test_probe_default_dialect_names_the_generic_limits(sim_bench):
    """The shipped default map's limits are those of a generic analyser (1 Hz - 3 GHz,
    down to -50 dBm, up to 1 MHz IF bandwidth); the simulated one is narrower. Every
    command works; the probe names each limit the instrument refuses, in its words."""
    code, out = run_probe(sim_bench.resources["analyzer"], "--map", "default", "--sweep")
    assert code == 2
    failed = lines_with(out, "FAIL")
    keys = sorted(line.split()[1].rstrip(":") for line in failed)
    assert keys == [
        "limits.frequency_hz.max",
        "limits.frequency_hz.min",
        "limits.ifbw_hz.max",
        "limits.power_dbm.min",
    ]
    assert all('-222,"Data out of range' in line for line in failed)
    assert out.count("sync by opc") == 4


def test_probe_restores_what_it_set(sim_bench_factory):
    bench = sim_bench_factory("demo_meas_stim")
    with VisaTransport.open(bench.resources["analyzer"], timeout_s=0.3) as link:
        cmap = load_command_map("meas_stim")
        before = [link.query(cmap.settings[k].query) for k in cmap.settings]
        report = probe(link, cmap, sweep=True)
        after = [link.query(cmap.settings[k].query) for k in cmap.settings]
    assert not report.failed
    assert after == before


def test_probe_names_each_wrong_entry_with_the_instrument_error(sim_bench_factory, tmp_path):
    bench = sim_bench_factory("demo_meas_stim")
    raw = yaml.safe_load((MAPS_DIR / "meas_stim.yaml").read_text(encoding="utf-8"))
    wrong = copy.deepcopy(raw)
    wrong["name"] = "wrong"
    wrong["sweep"]["points"]["set"] = "STIMulus:POINts {value}"  # no such node
    wrong["sweep"]["ifbw_hz"]["query"] = "RECeiver:BWIDth?"  # no such node
    wrong["limits"]["frequency_hz"]["max"] = 1.0e9  # above the instrument's 500 MHz
    wrong["data"]["format_commands"] = ["DATA:ENCoding REAL64", "DATA:ORDer LSBFirst"]
    path = tmp_path / "wrong.yaml"
    path.write_text(yaml.safe_dump(wrong), encoding="utf-8")
    draft = tmp_path / "draft.yaml"

    code, out = run_probe(bench.resources["analyzer"], "--map", str(path), "--draft", str(draft))
    assert code == 2
    failed = {line.split()[1].rstrip(":"): line for line in lines_with(out, "FAIL")}
    assert "STIMulus:POINts 2" in failed["sweep.points.set"]
    assert '-113,"Undefined header' in failed["sweep.points.set"]
    assert '-113,"Undefined header;RECeiver:BWIDth?' in failed["sweep.ifbw_hz.query"]
    assert '-222,"Data out of range' in failed["limits.frequency_hz.max"]
    assert "DATA:ENCoding REAL64" in failed["data.format_commands"]
    assert set(failed) == {
        "sweep.points.set",
        "sweep.ifbw_hz.query",
        "limits.frequency_hz.max",
        "data.format_commands",
    }
    # The draft keeps the instrument's identity and narrows the refused limit to the
    # stop frequency the instrument holds; it loads as a map.
    text = draft.read_text(encoding="utf-8")
    assert "SIM-VNA-0002" in text and "# FAILED limits.frequency_hz.max" in text
    drafted = yaml.safe_load(text)
    assert drafted["limits"]["frequency_hz"]["max"] == pytest.approx(500e6)
    assert load_command_map(draft).name == "wrong-draft"


def test_probe_gain_phase_analyser(sim_bench):
    code, out = run_probe(sim_bench.resources["gain_phase"], "--map", "gain_phase", "--sweep")
    assert code == 0, out
    assert "SIM-GPA-0001" in out and "data.traces (RATIO)" in out
