"""Loading and writing Touchstone files, and the message of each bad input."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
import skrf

from bench.core.conversions import shunt_through_s21
from bench.errors import InputError
from bench.touchstone import (
    interpolate_to,
    load_measurement,
    write_touchstone_s,
    write_touchstone_z,
)

F = np.logspace(2, 8, 41)
Z = 5e-3 + 1j * 2 * np.pi * F * 0.5e-9 + 1 / (1j * 2 * np.pi * F * 10e-6)


def _shunt_s(z: np.ndarray, z0: float = 50.0, rs: float = 0.0) -> np.ndarray:
    s21 = shunt_through_s21(z, z0, rs)
    s = np.empty((z.size, 2, 2), complex)
    s[:, 0, 1] = s[:, 1, 0] = s21
    s[:, 0, 0] = s[:, 1, 1] = s21 - 1
    return s


def test_z_file_round_trip(tmp_path: Path) -> None:
    path = write_touchstone_z(tmp_path / "part.s1p", F, Z, comments=["invented part ZC10U"])
    text = path.read_text()
    # Common practice (docs/references.md §6): an integer R, as in the spec's examples.
    assert "# Hz Z RI R 50" in text
    assert "R 50.0" not in text
    assert "!invented part ZC10U" in text
    m = load_measurement(path)
    assert m.kind == "impedance" and m.s is None and m.z0 == 50.0
    np.testing.assert_allclose(m.f, F, rtol=1e-12)
    np.testing.assert_allclose(m.z, Z, rtol=1e-9)


def test_z_file_is_normalised_to_r_in_version_1(tmp_path: Path) -> None:
    # Published (Touchstone 1.1 spec example, docs/references.md §6): '# MHz Z MA R 75' with
    # 0.99 at -4 degrees is 0.99·75 = 74.25 Ω in magnitude.
    lines = ["# MHz Z MA R 75"] + [f"{k + 1} 0.99 -4" for k in range(12)]
    path = tmp_path / "spec.s1p"
    path.write_text("\n".join(lines) + "\n")
    m = load_measurement(path)
    assert abs(m.z[0]) == pytest.approx(74.25, rel=1e-9)
    assert np.degrees(np.angle(m.z[0])) == pytest.approx(-4.0, abs=1e-9)
    assert m.f[0] == pytest.approx(1e6)


def test_s_file_round_trip_and_z_with_series_resistors(tmp_path: Path) -> None:
    s = _shunt_s(Z, rs=499.0)
    path = write_touchstone_s(tmp_path / "meas.s2p", F, s, comments=["a", "b"])
    m = load_measurement(path, series_r=499.0)
    assert m.kind == "s2p" and m.series_r == 499.0
    np.testing.assert_allclose(m.s, s, rtol=1e-10, atol=1e-15)
    np.testing.assert_allclose(m.z, Z, rtol=1e-8)
    np.testing.assert_allclose(m.s21, s[:, 1, 0])
    # scikit-rf reads our file back as the same network.
    net = skrf.Network(str(path))
    np.testing.assert_allclose(net.s, s, rtol=1e-10, atol=1e-15)


def test_integer_r_is_required_for_version_1(tmp_path: Path) -> None:
    with pytest.raises(ValueError, match="integer"):
        write_touchstone_s(tmp_path / "x.s2p", F, _shunt_s(Z), z0=50.5)


def _write(tmp_path: Path, name: str, text: str) -> Path:
    path = tmp_path / name
    path.write_text(text)
    return path


def _rows(n: int, cols: int, start: float = 1e3) -> list[str]:
    return [f"{start * (k + 1):g} " + " ".join(["0.1"] * cols) for k in range(n)]


BAD_CASES = [
    # (file name, content or None for missing, expected message, expected fix)
    ("missing.s2p", None, "file not found", "check the path"),
    ("notes.txt", "hello\n", "not a readable Touchstone", "option line"),
    ("junk.s2p", "hello world\nnot numbers\n", "not a readable Touchstone", "option line"),
    ("three.s3p", "# Hz S RI R 50\n" + "\n".join(_rows(12, 18)) + "\n", "3 ports", "ports 1 and 2"),
    ("h1.s1p", "# Hz H RI R 50\n" + "\n".join(_rows(12, 2)) + "\n", "H data", "S-parameters"),
    ("y1.s2p", "# Hz Y RI R 50\n" + "\n".join(_rows(12, 8)) + "\n", "version-1 Y", "S-parameters"),
    ("few.s2p", "# Hz S RI R 50\n" + "\n".join(_rows(5, 8)) + "\n", "5 frequency points", "more"),
    (
        "order.s2p",
        # Two rows swapped (a sweep run downward throughout is turned round instead).
        "# Hz S RI R 50\n"
        + "\n".join(_rows(12, 8)[:5] + _rows(12, 8)[6:4:-1] + _rows(12, 8)[7:])
        + "\n",
        "not strictly increasing",
        "sort",
    ),
    (
        # Values in Hz under an option line saying GHz: up to 1.2e16 Hz.
        "unit.s2p",
        "# GHz S RI R 50\n" + "\n".join(_rows(12, 8, start=1e6)) + "\n",
        "far beyond any network analyser",
        "option line",
    ),
    (
        "nan.s2p",
        "# Hz S RI R 50\n" + "\n".join([*_rows(11, 8), "1e6 nan 0 0.1 0 0.1 0 0 0"]) + "\n",
        "NaN",
        "measure again",
    ),
]


@pytest.mark.parametrize(
    ("name", "content", "message", "fix"), BAD_CASES, ids=[c[0] for c in BAD_CASES]
)
def test_bad_inputs_name_the_file_and_the_fix(
    tmp_path: Path, name: str, content: str | None, message: str, fix: str
) -> None:
    path = tmp_path / name if content is None else _write(tmp_path, name, content)
    with pytest.raises(InputError) as info:
        load_measurement(path)
    text = str(info.value)
    assert str(path) in text
    assert message in text
    assert "fix:" in text and fix in text
    assert info.value.exit_code == 2


def test_negative_series_resistance_is_refused(tmp_path: Path) -> None:
    path = write_touchstone_s(tmp_path / "m.s2p", F, _shunt_s(Z))
    with pytest.raises(InputError, match="series resistance"):
        load_measurement(path, series_r=-1.0)


def test_interpolate_mount_to_another_grid() -> None:
    fs = np.linspace(1e2, 2e8, 400)
    mount = 0.2e-3 + 1j * 2 * np.pi * fs * 150e-12
    ft = np.logspace(2, 8, 50)
    out = interpolate_to(ft, fs, mount)
    # R + jωL is linear in f, so linear interpolation is exact up to rounding.
    np.testing.assert_allclose(out, 0.2e-3 + 1j * 2 * np.pi * ft * 150e-12, rtol=1e-9)


def test_interpolate_refuses_to_extrapolate() -> None:
    fs = np.linspace(1e3, 1e8, 50)
    with pytest.raises(InputError, match="will not extrapolate") as info:
        interpolate_to(np.logspace(2, 8, 10), fs, np.ones(50, complex))
    assert "fix:" in str(info.value)


def test_scikit_rf_still_misreads_version_1_y_files(tmp_path: Path) -> None:
    # Published (Touchstone 1.1 spec): v1 Y data is normalised, so 0.5 with R 50 means
    # 0.5/50 = 0.01 S. Measured here (docs/references.md §6): scikit-rf 2.2 multiplies by R and
    # reads 25 S. This pins the reason load_measurement refuses v1 Y, G and H files;
    # when it fails, scikit-rf has changed and the refusal can be revisited.
    path = _write(tmp_path, "y.s1p", "# Hz Y RI R 50\n1 0.5 0\n2 0.5 0\n")
    net = skrf.Network(str(path))
    assert net.y[0, 0, 0] == pytest.approx(25.0)
    assert net.y[0, 0, 0] != pytest.approx(0.01)


@pytest.mark.parametrize("form", ["ri", "ma", "db"])
@pytest.mark.parametrize("parameter", ["S", "Z"])
def test_reader_agrees_with_scikit_rf(tmp_path: Path, form: str, parameter: str) -> None:
    # scikit-rf's own writer and reader (version 1.x, docs/references.md §6 and §8) are
    # the outside reference for zbench's parser of the same file.
    rng = np.random.default_rng(4)
    n = 25
    f = np.logspace(3, 8, n)
    s = 0.4 * (rng.normal(size=(n, 2, 2)) + 1j * rng.normal(size=(n, 2, 2)))
    net = skrf.Network(frequency=skrf.Frequency.from_f(f, unit="Hz"), s=s, z0=50.0, name="x")
    path = tmp_path / "x.s2p"
    text = net.write_touchstone(return_string=True, form=form, r_ref=50.0, parameter=parameter)
    path.write_text(text)
    m = load_measurement(path)
    ref = skrf.Network(str(path))
    np.testing.assert_allclose(m.f, ref.f, rtol=1e-12)
    np.testing.assert_allclose(m.s, ref.s, rtol=1e-7, atol=1e-9)


def test_version_2_data_order_and_version_1_noise_rows(tmp_path: Path) -> None:
    # Touchstone 1.x lists two-port data 11 21 12 22; 2.0 follows [Two-Port Data Order];
    # 1.x noise parameters follow the network data, starting with a fall in frequency
    # (docs/references.md §6).
    f = np.logspace(3, 6, 12)
    s11, s21, s12, s22 = 0.1 + 0.2j, 0.5 - 0.1j, 0.05 + 0j, -0.2 + 0.1j
    v1 = "".join(
        f"{x:g} {s11.real} {s11.imag} {s21.real} {s21.imag} {s12.real} {s12.imag} "
        f"{s22.real} {s22.imag}\n"
        for x in f
    )
    noise = "1000 1.5 0.3 10 0.4\n2000 1.6 0.3 11 0.4\n"
    one = load_measurement(_write(tmp_path, "v1.s2p", "# Hz S RI R 50\n" + v1 + noise))
    v2 = "".join(
        f"{x:g} {s11.real} {s11.imag} {s12.real} {s12.imag} {s21.real} {s21.imag} "
        f"{s22.real} {s22.imag}\n"
        for x in f
    )
    header = "[Version] 2.0\n# Hz S RI R 50\n[Number of Ports] 2\n"
    two = load_measurement(
        _write(tmp_path, "v2.s2p", header + "[Two-Port Data Order] 12_21\n" + v2 + "[End]\n")
    )
    for m in (one, two):
        assert m.f.size == 12
        assert (m.s[0, 1, 0], m.s[0, 0, 1]) == (pytest.approx(s21), pytest.approx(s12))
    with pytest.raises(InputError, match="Two-Port Data Order"):
        load_measurement(_write(tmp_path, "v2bad.s2p", header + v2))


EXAMPLES = Path(__file__).resolve().parents[2] / "examples"


@pytest.mark.skipif(not EXAMPLES.is_dir(), reason="the example measurements are not in this tree")
def test_plain_rows_read_in_one_pass_as_row_by_row(tmp_path: Path, monkeypatch) -> None:
    # Plain data rows are converted in one pass; the row-by-row reading (taken for
    # anything else) must give the very same numbers, comments and shape.
    import bench.touchstone_scan as scan_module

    plain = sorted(EXAMPLES.glob("*.s?p"))
    written = write_touchstone_s(tmp_path / "w.s2p", F, _shunt_s(Z), comments=["written here"])
    files = [*plain, written]
    fast = {path: scan_module.scan_touchstone(Path(path)) for path in files}
    taken = []
    original = scan_module._plain_rows

    def watched(lines, width):
        rows = original(lines, width)
        taken.append(rows is not None)
        return rows

    monkeypatch.setattr(scan_module, "_plain_rows", watched)
    for path in files:
        scan_module.scan_touchstone(Path(path))
    assert all(taken) and len(taken) == len(files)
    monkeypatch.setattr(scan_module, "_plain_rows", lambda lines, width: None)
    for path in files:
        slow = scan_module.scan_touchstone(Path(path))
        assert np.array_equal(fast[path].data, slow.data)
        assert fast[path].comments == slow.comments and fast[path].rows == slow.rows


def test_a_comment_after_a_row_is_kept_and_the_row_read(tmp_path: Path) -> None:
    rows = "".join(f"{x:g} 0.5 0.1\n" for x in F[:-1]) + f"{F[-1]:g} 0.5 0.1 ! last point\n"
    m = load_measurement(_write(tmp_path, "c.s1p", "# Hz S RI R 50\n" + rows))
    assert m.f.size == F.size and m.s[-1, 0, 0] == pytest.approx(0.5 + 0.1j)
    assert "last point" in m.comments


def test_a_segmented_sweeps_repeated_frequency_is_read_once_as_the_mean(tmp_path: Path) -> None:
    # Two segments sharing the frequency where one ends and the next begins, each with
    # its own reading there (the second segment a little off: another IF bandwidth).
    f = np.concatenate([F[:21], F[20:]])
    s = _shunt_s(Z[np.r_[0:21, 20 : F.size]])
    s[21] *= 1.001
    lines = ["# Hz S RI R 50"] + [
        f"{fi:.15g} " + " ".join(f"{v.real:.15g} {v.imag:.15g}" for v in row.T.ravel())
        for fi, row in zip(f, s, strict=True)
    ]
    path = _write(tmp_path, "segments.s2p", "\n".join(lines) + "\n")
    m = load_measurement(path)
    np.testing.assert_allclose(m.f, F, rtol=1e-14)
    np.testing.assert_allclose(m.s[20], 0.5 * (s[20] + s[21]), rtol=1e-12)
    np.testing.assert_allclose(m.s[21:], s[22:], rtol=1e-12)
    assert any("1 repeated frequency" in w and "mean" in w for w in m.warnings)


def test_a_file_without_repeats_has_no_such_note(tmp_path: Path) -> None:
    m = load_measurement(write_touchstone_s(tmp_path / "plain.s2p", F, _shunt_s(Z)))
    assert not any("repeated" in w for w in m.warnings)


def test_a_sweep_that_ends_below_100_hz_is_noted_as_a_likely_unit_slip(tmp_path: Path) -> None:
    # Values in GHz under an option line saying Hz: 0.001 to 0.012 "Hz".
    path = _write(tmp_path, "slip.s2p", "# Hz S RI R 50\n" + "\n".join(_rows(12, 8, 1e-3)) + "\n")
    m = load_measurement(path)
    assert any("state that unit" in w for w in m.warnings)
    assert not any(
        "state that unit" in w
        for w in load_measurement(
            write_touchstone_s(tmp_path / "plain.s2p", F, _shunt_s(Z))
        ).warnings
    )


def test_an_infinite_value_in_a_version_1_z_file_is_refused_without_a_warning(
    tmp_path: Path,
) -> None:
    # Version 1 Z data are normalised to R; taking them back to ohms must not warn on a
    # row holding "inf" (the suite turns warnings into errors): the file is refused for
    # that row, named, as for any point without a number.
    rows = [f"{f:g} {z.real / 50:.6g} {z.imag / 50:.6g}" for f, z in zip(F, Z, strict=True)]
    rows[5] = f"{F[5]:g} inf 0"
    path = tmp_path / "inf.s1p"
    path.write_text("# Hz Z RI R 50\n" + "\n".join(rows) + "\n", encoding="utf-8")
    with pytest.raises(InputError, match=rf"has no number .* at 1 frequency \({F[5]:g} Hz\)"):
        load_measurement(path)


def test_a_sweep_run_from_the_top_down_is_read_in_increasing_order(tmp_path: Path) -> None:
    s = _shunt_s(Z)
    rows = lambda order: [  # noqa: E731
        f"{F[i]:.15g} " + " ".join(f"{v.real:.15g} {v.imag:.15g}" for v in s[i].T.ravel())
        for i in order
    ]
    up = load_measurement(
        _write(tmp_path, "up.s2p", "\n".join(["# Hz S RI R 50", *rows(range(F.size))]) + "\n")
    )
    down_order = list(range(F.size))[::-1]
    down = load_measurement(
        _write(tmp_path, "down.s2p", "\n".join(["# Hz S RI R 50", *rows(down_order)]) + "\n")
    )
    np.testing.assert_array_equal(down.f, up.f)
    np.testing.assert_array_equal(down.s, up.s)
    assert any("from its top frequency down" in w for w in down.warnings)
    assert not any("top frequency down" in w for w in up.warnings)
    # Down with a segment's shared end repeated: turned round, then read once.
    repeated = down_order[:10] + down_order[9:]
    both = load_measurement(
        _write(tmp_path, "both.s2p", "\n".join(["# Hz S RI R 50", *rows(repeated)]) + "\n")
    )
    np.testing.assert_array_equal(both.f, up.f)
    assert any("top frequency down" in w and "1 repeated frequency" in w for w in both.warnings)
    # Out of order otherwise (one row swapped): still refused, naming the point.
    swapped = list(range(F.size))
    swapped[5], swapped[6] = 6, 5
    with pytest.raises(InputError, match="not strictly increasing"):
        load_measurement(
            _write(tmp_path, "swap.s2p", "\n".join(["# Hz S RI R 50", *rows(swapped)]) + "\n")
        )
