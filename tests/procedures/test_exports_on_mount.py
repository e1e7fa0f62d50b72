"""Two SPICE exports per part: the part alone (mount removed) and the part on its mount
(mount included), named so they are not mixed up."""

from __future__ import annotations

import dataclasses

import numpy as np
import pytest

from bench import exports


def test_a_sample_whose_mount_was_removed_gets_both_subcircuits(summary, tmp_path):
    sample = next(s for s in summary.samples if s.fit is not None)
    data = sample.data
    mount_r, mount_l = 1.5e-3, 0.35e-9
    measured = data.z + mount_r + 2j * np.pi * data.f * mount_l
    mounted = dataclasses.replace(sample, data=dataclasses.replace(data, z_measured=measured))
    run = dataclasses.replace(summary, samples=(mounted,))
    written = exports.write_exports(tmp_path, run)
    names = sorted(p.name for p in written["spice"])
    label = exports.safe_filename(sample.label)
    assert names == sorted([f"{label}.sub", f"{label}_on_mount.sub"])
    alone = (tmp_path / "models" / f"{label}.sub").read_text()
    on_mount = (tmp_path / "models" / f"{label}_on_mount.sub").read_text()
    name = exports.sample_spice_name(sample)
    assert f".subckt {name} 1 2" in alone and "mount removed" in alone
    assert f".subckt {name}_on_mount 1 2" in on_mount and "mount included" in on_mount
    r_line = next(ln for ln in on_mount.splitlines() if ln.startswith("Rmount"))
    l_line = next(ln for ln in on_mount.splitlines() if ln.startswith("Lmount"))
    assert float(r_line.split()[-1]) == pytest.approx(mount_r, rel=0.05)
    assert float(l_line.split()[-1]) == pytest.approx(mount_l, rel=0.05)
    library = (tmp_path / "models" / f"{exports.safe_filename(sample.part)}.lib").read_text()
    assert f"{name}_on_mount" in library
