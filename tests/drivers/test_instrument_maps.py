"""Switch and DC-source command maps in YAML: the shipped ones, file maps, and refusals
that name the file and key without quoting the file."""

from __future__ import annotations

import dataclasses

import pytest
import yaml

from drivers.dc_source import DcSource, DcSourceCommands
from drivers.errors import CommandMapError
from drivers.instrument_maps import MAPS_DIR, available_maps, load_instrument_map
from drivers.switch import SwitchCommands


@pytest.mark.parametrize(
    ("kind", "commands"), [("switch", SwitchCommands), ("dc_source", DcSourceCommands)]
)
def test_shipped_default_map_speaks_the_drivers_default_forms(kind, commands):
    assert "default" in available_maps(kind)
    loaded = load_instrument_map(kind, "default")
    defaults = commands()
    for f in dataclasses.fields(commands):
        if getattr(defaults, f.name) is not None:
            assert getattr(loaded, f.name) == getattr(defaults, f.name), f.name


def test_default_dc_map_asks_the_maximum_and_sets_over_voltage_protection():
    loaded = load_instrument_map("dc_source")
    assert loaded.voltage_max_query.endswith("? MAXimum")
    assert "{value}" in loaded.over_voltage
    # Left out on purpose: an over-current trip would fire while a ramp charges a part.
    assert loaded.over_current is None


def test_a_map_file_is_a_new_dialect_without_code(tmp_path):
    raw = {
        "name": "relay-box",
        "open_all": "OPEN:ALL",
        "close": "CLOSE {position}",
        "close_query": "CLOSE? {position}",
        "settled": "*OPC?",
        "error_query": "SYST:ERR?",
    }
    path = tmp_path / "relay.yaml"
    path.write_text(yaml.safe_dump(raw), encoding="utf-8")
    commands = load_instrument_map("switch", path)
    assert commands.close.format(position=3) == "CLOSE 3"


@pytest.mark.parametrize(
    ("change", "key", "words"),
    [
        (lambda m: m.update(clsoe="X"), "", "unknown key 'clsoe'"),
        (lambda m: m.update(close="ROUT:CLOS (@{pos})"), "close", "wrong fields"),
        (lambda m: m.pop("open_all"), "", "missing key 'open_all'"),
        (lambda m: m.update(settled="*OPC?\nOUTP ON"), "settled", "one line"),
    ],
    ids=["misspelt key", "wrong field", "missing key", "two lines"],
)
def test_a_bad_map_names_file_and_key(tmp_path, change, key, words):
    raw = yaml.safe_load((MAPS_DIR / "switch" / "default.yaml").read_text())
    change(raw)
    path = tmp_path / "bad.yaml"
    path.write_text(yaml.safe_dump(raw), encoding="utf-8")
    with pytest.raises(CommandMapError, match=words) as info:
        load_instrument_map("switch", path)
    assert info.value.path == str(path)
    if key:
        assert info.value.key == key


@pytest.mark.parametrize("kind", ["switch", "dc_source"])
def test_a_file_that_is_no_map_is_refused_without_quoting_it(tmp_path, kind):
    path = tmp_path / "notes.yaml"
    path.write_text("root:x:0:0:secret-token-123:/root\nmore: secret-token-456\n", encoding="utf-8")
    for text in ("root:x:0:0:secret-token-123:/root\n", "secret-token-456: 1\nname: x\n"):
        path.write_text(text, encoding="utf-8")
        with pytest.raises(CommandMapError) as info:
            load_instrument_map(kind, path)
        assert "secret" not in str(info.value)


class _Recorder:
    resource_name = "FAKE::DC"

    def __init__(self):
        self.sent: list[str] = []

    def write(self, command):
        self.sent.append(command)

    def query(self, command):
        self.sent.append(command)
        return '0,"No error"'


def test_zero_and_off_switches_off_first_then_sets_zero_volts():
    link = _Recorder()
    DcSource(link, max_voltage=10, max_current=0.01).zero_and_off()
    writes = [c for c in link.sent if not c.startswith("SYST")]
    assert writes == ["OUTPut:STATe OFF", "SOURce:VOLTage:LEVel:IMMediate:AMPLitude 0"]


def test_protection_is_set_only_where_the_map_has_it():
    link = _Recorder()
    plain = DcSource(link, max_voltage=10, max_current=0.01)
    assert plain.set_protection(6.3, 0.01) == []
    mapped = DcSource(
        link, max_voltage=10, max_current=0.01, commands=load_instrument_map("dc_source")
    )
    assert mapped.set_protection(6.3, 0.01) == ["over-voltage protection 6.3 V"]
    assert "SOURce:VOLTage:PROTection:LEVel 6.3" in link.sent
