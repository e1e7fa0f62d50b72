"""Shared fixtures of the procedure-layer tests: the in-memory run of
``run_summary_data.py``, built once per session (its fits take a few seconds)."""

from __future__ import annotations

import importlib.util
from pathlib import Path
from types import ModuleType

import pytest

from bench.results import RunSummary


@pytest.fixture(scope="session")
def summary_data() -> ModuleType:
    """``run_summary_data.py`` imported by file path (the tests are not a package)."""
    path = Path(__file__).with_name("run_summary_data.py")
    spec = importlib.util.spec_from_file_location("run_summary_data", path)
    assert spec is not None and spec.loader is not None
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    return module


@pytest.fixture(scope="session")
def summary(summary_data: ModuleType) -> RunSummary:
    """The small invented run, through the real impedance chain and fitter."""
    return summary_data.build()


@pytest.fixture(scope="session")
def written_report(summary: RunSummary, tmp_path_factory) -> tuple[Path, Path, str]:
    """The small run's report, written once for every module that reads it: its folder,
    the path of ``report.html`` and its text (the figures are embedded in it)."""
    from bench import report

    folder = tmp_path_factory.mktemp("report")
    path = report.write_report(folder, summary)
    return folder, path, path.read_text(encoding="utf-8")
