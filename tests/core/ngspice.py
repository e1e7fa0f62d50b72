"""Running an exported SPICE library through ngspice, for the tests that check our
subcircuits against their analytic impedance (ngspice as an outside reference)."""

from __future__ import annotations

import re
import shutil
import subprocess

import numpy as np
import pytest

NGSPICE = shutil.which("ngspice")
needs_ngspice = pytest.mark.skipif(
    NGSPICE is None,
    reason="ngspice is not installed (Debian package 'ngspice'; .ci/run installs it)",
)


def run_ngspice(
    tmp_path, library: str, name: str, f_lo: float = 1e3, f_hi: float = 200e6
) -> tuple[np.ndarray, np.ndarray]:
    """(f, Z) of subcircuit ``name`` from an AC analysis, 20 points a decade from ``f_lo``
    to ``f_hi`` (Hz): 1 A into pin 1, pin 2 grounded, so v(1) is Z."""
    (tmp_path / "models.lib").write_text(library)
    deck = f"""* impedance of {name} by a 1 A AC current source into pin 1
.include models.lib
I1 0 1 DC 0 AC 1
X1 1 0 {name}
.ac dec 20 {f_lo:g} {f_hi:g}
.control
run
wrdata z.txt v(1)
quit
.endc
.end
"""
    (tmp_path / "deck.cir").write_text(deck)
    proc = subprocess.run(
        [NGSPICE, "-b", "deck.cir"], cwd=tmp_path, capture_output=True, text=True, timeout=60
    )
    log = proc.stdout + proc.stderr
    assert proc.returncode == 0, log
    assert not re.search(r"singular matrix|error", log, flags=re.IGNORECASE), log
    data = np.loadtxt(tmp_path / "z.txt")
    return data[:, 0], data[:, 1] + 1j * data[:, 2]
