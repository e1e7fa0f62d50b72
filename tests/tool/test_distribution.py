"""The distribution's name and what it installs."""

from __future__ import annotations

import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[2]


@pytest.mark.skipif(
    sys.version_info < (3, 11), reason="tomllib is in the standard library from 3.11"
)
def test_distribution_name_is_not_the_taken_one_and_the_command_stays_zbench():
    import tomllib

    project = tomllib.loads((ROOT / "pyproject.toml").read_text(encoding="utf-8"))["project"]
    # `zbench` on the public package index is an unrelated project (checked with
    # `pip download --no-deps zbench`); `zbench-pdn` was free there when chosen.
    assert project["name"] == "zbench-pdn"
    assert project["scripts"] == {"zbench": "bench.cli:main"}
