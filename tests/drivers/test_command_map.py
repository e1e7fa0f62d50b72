"""Command maps: loading, strict validation and messages that name file and key."""

from __future__ import annotations

import copy

import pytest
import yaml

from drivers.command_map import (
    MAPS_DIR,
    available_command_maps,
    format_number,
    load_command_map,
    mnemonic_matches,
)
from drivers.errors import CommandMapError

DEFAULT = yaml.safe_load((MAPS_DIR / "default.yaml").read_text())


def write_map(tmp_path, raw, name="dialect.yaml"):
    path = tmp_path / name
    path.write_text(yaml.safe_dump(raw))
    return path


def test_default_map_speaks_the_design_forms():
    cmap = load_command_map("default")
    assert "default" in available_command_maps()
    assert "command_map.schema" not in available_command_maps()
    assert cmap.identity == "*IDN?"
    assert cmap.settings["start_hz"].command(100.0) == "SENSe:FREQuency:STARt 100"
    assert cmap.settings["spacing"].command("log") == "SENSe:SWEep:SPACing LOGarithmic"
    assert cmap.trace_command("S21") == "TRACe:DATA? S21"
    assert cmap.big_endian and cmap.datatype == "d" and cmap.encoding == "binary"
    assert 201 in cmap.limits.points


def test_load_by_path_equals_load_by_name(tmp_path):
    path = write_map(tmp_path, DEFAULT)
    assert load_command_map(path).settings == load_command_map("default").settings


def test_unknown_key_is_an_error_naming_file_and_key(tmp_path):
    raw = copy.deepcopy(DEFAULT)
    raw["sweep"]["start_hz"]["sett"] = "FREQ:STAR {value}"
    path = write_map(tmp_path, raw)
    with pytest.raises(CommandMapError) as info:
        load_command_map(path)
    assert info.value.path == str(path)
    assert info.value.key == "sweep.start_hz"
    assert "sett" in str(info.value)


def test_missing_key(tmp_path):
    raw = copy.deepcopy(DEFAULT)
    del raw["data"]["traces"]
    with pytest.raises(CommandMapError, match="traces"):
        load_command_map(write_map(tmp_path, raw))


def test_template_without_value_field(tmp_path):
    raw = copy.deepcopy(DEFAULT)
    raw["sweep"]["points"]["set"] = "SENSe:SWEep:POINts"
    with pytest.raises(CommandMapError) as info:
        load_command_map(write_map(tmp_path, raw))
    assert info.value.key == "sweep.points.set"
    assert "{value}" in str(info.value)


def test_template_with_unknown_field(tmp_path):
    raw = copy.deepcopy(DEFAULT)
    raw["data"]["traces"]["query"] = "CALC{channel}:DATA? {parameter}"
    with pytest.raises(CommandMapError, match="channel"):
        load_command_map(write_map(tmp_path, raw))


def test_range_upside_down(tmp_path):
    raw = copy.deepcopy(DEFAULT)
    raw["limits"]["power_dbm"] = {"min": 10, "max": -10}
    with pytest.raises(CommandMapError) as info:
        load_command_map(write_map(tmp_path, raw))
    assert info.value.key == "limits.power_dbm"


def test_bad_yaml_gives_the_line(tmp_path):
    path = tmp_path / "broken.yaml"
    path.write_text("name: x\ncommon: [\n  unclosed\n")
    with pytest.raises(CommandMapError, match="line"):
        load_command_map(path)


def test_unknown_shipped_name_lists_the_maps():
    with pytest.raises(CommandMapError, match="default"):
        load_command_map("no-such-dialect")


def test_unreadable_file(tmp_path):
    with pytest.raises(CommandMapError, match="cannot read"):
        load_command_map(tmp_path / "absent.yaml")


def test_mnemonic_matching_short_and_long_forms():
    # SCPI-99 vol. 1 §6.2.1: the short form is the upper-case part [from memory]
    assert mnemonic_matches("LIN", "LINear")
    assert mnemonic_matches("linear", "LINear")
    assert mnemonic_matches(' "LOG" ', "LOGarithmic")
    assert not mnemonic_matches("LINE", "LINear")
    assert not mnemonic_matches("LOG", "LINear")


def test_format_number():
    assert format_number(201) == "201"
    assert format_number(100e6) == "100000000"
    assert format_number(4.7e-9) == "4.7e-09"
    assert format_number(-12.5) == "-12.5"
    # exact: a value at a limit must not be rounded to one above it
    assert float(format_number(1.0955163172973315)) == 1.0955163172973315
    with pytest.raises(TypeError):
        format_number(True)


MEAS_STIM = yaml.safe_load((MAPS_DIR / "meas_stim.yaml").read_text())


@pytest.mark.parametrize(
    ("edit", "key", "words"),
    [
        (lambda m: m["trigger"]["sync"].pop("mask"), "trigger.sync", "mask"),
        (lambda m: m["trigger"]["sync"].update(method="wait"), "trigger.sync.method", "opc"),
        (
            lambda m: m["data"]["traces"].update(query="MEASure:VALues?"),
            "data.traces.query",
            "{number}",
        ),
        (
            lambda m: m["data"]["traces"].update(numbers={"S11": 1, "S21": 1}),
            "data.traces.numbers",
            "share a number",
        ),
        (
            lambda m: m["data"]["traces"].update(select_by="channel"),
            "data.traces.define",
            "no define",
        ),
        (lambda m: m["data"].update(format="real16"), "data.format", "real32"),
        (
            lambda m: m["common"]["error_codes"].append({"code": 201, "meaning": "again"}),
            "common.error_codes.4.code",
            "twice",
        ),
        (lambda m: m["data"].update(parameters=["RATIO"]), "data.parameters", "kind"),
    ],
)
def test_new_map_keys_are_checked_with_file_key_and_fix(tmp_path, edit, key, words):
    raw = copy.deepcopy(MEAS_STIM)
    edit(raw)
    path = write_map(tmp_path, raw)
    with pytest.raises(CommandMapError) as info:
        load_command_map(path)
    assert info.value.path == str(path)
    assert info.value.key == key
    assert words in str(info.value)
    assert "fix:" in str(info.value)


def test_meas_stim_map_reads_every_axis():
    cmap = load_command_map("meas_stim")
    assert cmap.sync.method == "poll" and cmap.sync.mask == 2
    assert cmap.sync.before == ("STATus:SWEep:CLEar",)
    assert (cmap.data_format, cmap.datatype, cmap.big_endian) == ("real32", "f", False)
    assert cmap.frequency_query is None
    assert cmap.trace_commands("S21") == (["MEASure2:DEFine S21"], "MEASure2:VALues?")
    assert "define it first" in cmap.explain_error(201)
