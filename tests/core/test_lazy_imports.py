"""The command line loads only what a command uses.

``zbench fit`` must not pay for plotting, the report, the procedure machinery or the
drivers; ``--help`` not even for scikit-rf or the numeric core. Checked in a fresh
interpreter through ``sys.modules`` (behaviour, not time; timings are in benchmarks/).
"""

from __future__ import annotations

import json
import subprocess
import sys
import textwrap
from pathlib import Path

import pytest

EXAMPLE = Path(__file__).resolve().parents[2] / "examples" / "mlcc_22u.s2p"
HEAVY = (
    "numpy",
    "bench.core",
    "matplotlib",
    "skrf",
    "scipy",
    "jinja2",
    "pyvisa",
    "yaml",
    "rich",
    "bench.report",
    "bench.plots",
    "bench.procedure",
    "simulated_instruments",
)


def loaded_after(args: list[str]) -> set[str]:
    script = textwrap.dedent(
        f"""
        import json, sys
        from bench.cli import main
        code = main({args!r})
        print(json.dumps([code, sorted(sys.modules)]))
        """
    )
    done = subprocess.run(
        [sys.executable, "-c", script], capture_output=True, text=True, timeout=120
    )
    assert done.returncode == 0, done.stderr
    code, modules = json.loads(done.stdout.strip().splitlines()[-1])
    assert code in (0, 3), done.stderr
    return {m for m in modules if any(m == h or m.startswith(h + ".") for h in HEAVY)}


def test_importing_the_command_line_loads_nothing_heavy():
    assert loaded_after(["--help"]) == set()


def test_fit_help_loads_no_plotting_and_no_scikit_rf():
    heavy = loaded_after(["fit", "--help"])
    assert not {m for m in heavy if m.split(".")[0] in ("matplotlib", "skrf", "numpy")}
    assert not {m for m in heavy if m.startswith("bench.core")}
    assert not {m for m in heavy if m.startswith(("bench.report", "bench.plots"))}


@pytest.mark.skipif(not EXAMPLE.exists(), reason="the example measurement is not in this tree")
def test_fitting_a_file_loads_no_plotting_report_or_procedure():
    heavy = loaded_after(["fit", str(EXAMPLE), "--json"])
    roots = {m.split(".")[0] for m in heavy}
    assert "matplotlib" not in roots
    assert "jinja2" not in roots and "pyvisa" not in roots
    # Reading and fitting an S-parameter file need no scikit-rf (writing files does), and
    # of scipy.optimize only its MINPACK extension (the package is half the start-up).
    assert "skrf" not in roots
    assert "scipy.optimize" not in heavy and "scipy.optimize._minpack" in heavy
    assert not {
        m for m in heavy if m.startswith(("bench.report", "bench.plots", "bench.procedure"))
    }


def test_minpack_falls_back_to_the_usual_import(monkeypatch):
    # Where scipy's files cannot be found, the driver comes from scipy.optimize itself.
    import importlib.util

    import bench.core.minpack as minpack

    def not_found(name, *args):
        raise ImportError(name)

    monkeypatch.delitem(sys.modules, "scipy.optimize._minpack", raising=False)
    monkeypatch.setattr(importlib.util, "find_spec", not_found)
    module = minpack._extension()
    assert module is not None and callable(module._lmder)


def test_mount_and_ground_loop_checks_load_no_scipy_optimize():
    # A run's mount-short steps fit the mount, its pads and the ground loop in the main
    # process, beside the sweeps: MINPACK's extension serves them as it serves the fit.
    script = textwrap.dedent(
        """
        import json, sys
        import numpy as np
        from bench.core.fixture import fit_mount, fit_open
        from bench.core.ground_loop import check_ground_loop
        f = np.logspace(2, 8, 301)
        z = 2e-4 + 2j * np.pi * f * 150e-12 + 3e-3 / (1 + 1j * f / 2e3)
        check_ground_loop(f, z)
        fit_mount(f, z)
        fit_open(f, 1 / (2j * np.pi * f * 0.3e-12))
        print(json.dumps(sorted(sys.modules)))
        """
    )
    done = subprocess.run(
        [sys.executable, "-c", script], capture_output=True, text=True, timeout=120
    )
    assert done.returncode == 0, done.stderr
    modules = set(json.loads(done.stdout.strip().splitlines()[-1]))
    assert "scipy.optimize" not in modules
