"""Files a procedure points at (command maps, an earlier run's calibration) are accepted
only when they validate, and never quoted in a message."""

from __future__ import annotations

import json

import pytest

from bench.errors import InputError
from bench.procedure.loader import ProcedureErrors
from bench.procedure.plan import plan_from_text
from bench.runstore import RunStore

SECRET = "secret-token-123"
TEXT = """\
name: maps
mode: unattended
instruments:
  {role}: {{command_map: {path}}}
sweep: {{start: 1 kHz, stop: 10 MHz, points: 11}}
parts: [{{name: A, kind: mlcc}}]
"""


@pytest.mark.parametrize("role", ["analyzer", "switch", "dc_source"])
@pytest.mark.parametrize(
    "content",
    [f"root:x:0:0:{SECRET}:/root:/bin/bash\n", f"{SECRET}: 1\nname: x\n", f"- {SECRET}\n"],
    ids=["a text line", "a mapping", "a list"],
)
def test_a_command_map_that_does_not_validate_is_refused_at_check(tmp_path, role, content):
    # Before: any file was taken, and the run's error printed its contents.
    path = tmp_path / "not-a-map.yaml"
    path.write_text(content, encoding="utf-8")
    with pytest.raises(ProcedureErrors) as info:
        plan_from_text(TEXT.format(role=role, path=path), "maps.yaml")
    assert info.value.key == f"instruments.{role}.command_map"
    assert "does not load" in str(info.value) and str(path) in str(info.value)
    assert SECRET not in str(info.value)


@pytest.mark.parametrize(
    "manifest",
    [
        [SECRET],
        {"format": 1, "steps": [{"id": "calibrate/short", "files": ["../../etc/passwd"]}]},
        {"format": 1, "steps": [{"id": "calibrate/short", "files": ["/etc/passwd"]}]},
        json.loads("[" * 50 + "]" * 50),
    ],
    ids=["not a mapping", "a file outside the run", "an absolute file", "nested"],
)
def test_a_run_folder_whose_manifest_is_not_zbenchs_is_refused(tmp_path, manifest):
    (tmp_path / "manifest.json").write_text(json.dumps(manifest), encoding="utf-8")
    with pytest.raises(InputError, match=r"not a zbench run manifest|cannot be read") as info:
        RunStore.open(tmp_path)
    assert SECRET not in str(info.value)


def test_a_deeply_nested_manifest_is_refused_not_a_recursion_error(tmp_path):
    (tmp_path / "manifest.json").write_text("[" * 100_000 + "]" * 100_000, encoding="utf-8")
    with pytest.raises(InputError, match=r"nested too deeply|not a zbench run manifest"):
        RunStore.open(tmp_path)
