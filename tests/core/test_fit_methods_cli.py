"""``zbench fit`` over every method: the method inferred from the file or given, CSV
input taken as given, ``--join`` of set-ups, and the file-hardening regressions (bad
option lines, wrong port counts, files without an option line, absurd or empty values,
version-2 row counts, FIFOs, size bound, subcircuit name clashes, unwritable output)."""

from __future__ import annotations

import errno
import json
import os
import threading
from pathlib import Path

import numpy as np
import pytest
import skrf

import bench.touchstone_scan as touchstone_scan
from bench.cli import main
from bench.core.conversions import series_through_s21, shunt_through_s21
from bench.errors import InputError
from bench.touchstone import load_measurement, method_comment, write_touchstone_s

F = np.logspace(4, 9, 201)


def _inductor(f: np.ndarray) -> np.ndarray:
    """Invented power inductor: 2.2 µH, 40 mΩ, 5 kΩ core loss, 1.5 pF winding capacitance."""
    jw = 2j * np.pi * f
    core = 1 / (1 / (0.04 + jw * 2.2e-6) + 1 / 5e3)
    return 1 / (1 / core + jw * 1.5e-12)


def _two_port(path: Path, s21: np.ndarray, comments=()) -> Path:
    s = np.empty((s21.size, 2, 2), complex)
    s[:, 0, 0] = s[:, 1, 1] = 0.0
    s[:, 1, 0] = s[:, 0, 1] = s21
    return write_touchstone_s(path, F, s, comments=comments)


def run(capsys: pytest.CaptureFixture[str], *args: object) -> tuple[int, str, str]:
    code = main(["fit", *map(str, args)])
    out, err = capsys.readouterr()
    return code, out, err


# ------------------------------------------------------------------- method inference


def test_one_port_s_file_is_a_reflection(capsys, tmp_path: Path) -> None:
    gamma = skrf.network.z2s(_inductor(F).reshape(-1, 1, 1), 50.0)[:, 0, 0]
    path = write_touchstone_s(tmp_path / "ind.s1p", F, gamma)
    code, out, err = run(capsys, path, "--json")
    assert code in (0, 3), err
    assert "reflection (a one-port S file)" in err
    record = json.loads(out)
    assert record["landmarks"]["l_low"] == pytest.approx(2.2e-6, rel=0.02)
    # Reflection's window (about 1.3 Ω to 1.9 kΩ) drops the lowest and highest points.
    assert 0 < record["quality"]["points_outside_window"] < F.size


def test_two_port_method_from_comments_or_option(capsys, tmp_path: Path) -> None:
    s21 = series_through_s21(_inductor(F))
    stated = _two_port(tmp_path / "stated.s2p", s21, [method_comment("series-through")])
    plain = _two_port(tmp_path / "plain.s2p", s21)
    assert load_measurement(stated).method == "series-through"
    assert load_measurement(plain).method == "shunt-through"
    code, out, err = run(capsys, stated, "--json")
    assert "series-through, as its comments state" in err
    from_comment = json.loads(out)
    code, out, err = run(capsys, plain, "--method", "series-through", "--json")
    assert code in (0, 3), err
    from_option = json.loads(out)
    for record in (from_comment, from_option):
        assert record["landmarks"]["l_low"] == pytest.approx(2.2e-6, rel=0.02)
    # Read as shunt-through, the same file is another (wrong) part: the default is said.
    _code, out, err = run(capsys, plain, "--json")
    assert "shunt-through (a two-port S file; give --method series-through" in err


def test_csv_is_taken_as_given_unless_a_method_is_stated(capsys, tmp_path: Path) -> None:
    z = _inductor(F)
    path = tmp_path / "analyser.csv"
    rows = "".join(
        f"{float(f)!r},{float(v.real)!r},{float(v.imag)!r}\n" for f, v in zip(F, z, strict=True)
    )
    path.write_text("Frequency [Hz],R [Ohm],X [Ohm]\n" + rows)
    code, out, err = run(capsys, path, "--json")
    assert code in (0, 3), err
    assert "impedance taken as given" in err
    given = json.loads(out)
    assert given["quality"]["points_outside_window"] == 0
    assert given["landmarks"]["l_low"] == pytest.approx(2.2e-6, rel=0.02)
    code, out, err = run(capsys, path, "--method", "shunt-through", "--json")
    judged = json.loads(out)
    assert judged["quality"]["points_outside_window"] > 50  # shunt-through ceiling ~190 Ω


def test_join_stitches_two_set_ups_of_one_part(capsys, tmp_path: Path) -> None:
    z = _inductor(F)
    low = _two_port(tmp_path / "low.s2p", shunt_through_s21(z))
    high = _two_port(
        tmp_path / "high.s2p", series_through_s21(z), [method_comment("series-through")]
    )
    out_sub = tmp_path / "part.sub"
    code, out, err = run(capsys, low, high, "--join", "--json", "--spice", out_sub)
    assert code in (0, 3), err
    record = json.loads(out)
    assert [s["method"] for s in record["segments"]] == ["shunt-through", "series-through"]
    assert record["disagreements"] == []
    assert record["quality"]["points_outside_window"] == 0
    assert record["landmarks"]["z_at_srf"] > 1e3 and out_sub.exists()
    code, out, err = run(capsys, low, "--join")
    assert code == 2 and "two or more files" in err


# ------------------------------------------------------------------- hardening


def _write(tmp_path: Path, name: str, text: str) -> Path:
    path = tmp_path / name
    path.write_text(text)
    return path


def _rows(n: int, values: str) -> str:
    return "".join(f"{1e3 * (k + 1):g} {values}\n" for k in range(n))


HARDENING = [
    # (case, file name, content, message)
    ("R 0", "r0.s2p", "# Hz S RI R 0\n" + _rows(12, "0 0 0.5 0 0.5 0 0 0"), "must be a positive"),
    ("R -50", "rneg.s2p", "# Hz S RI R -50\n" + _rows(12, "0 0 0.5 0 0.5 0 0 0"), "R -50 must be"),
    (
        "one-port rows in .s2p",
        "one.s2p",
        "# Hz S RI R 50\n" + _rows(36, "0.5 0"),
        "has 3 numbers in a row where a 2-port file has 9",
    ),
    (
        "1e308 values",
        "huge.s2p",
        "# Hz S RI R 50\n" + _rows(12, "1e308 1e308 1e308 1e308 1e308 1e308 1e308 1e308"),
        "holds values up to 1e+308, which no measurement of a passive part gives",
    ),
    (
        "all zero",
        "zero.s2p",
        "# Hz S RI R 50\n" + _rows(12, "0 0 0 0 0 0 0 0"),
        "every value in the file is zero: there is no measurement in it, and nothing was "
        "fitted or written",
    ),
    (
        "v2 frequency count",
        "count.s2p",
        "[Version] 2.0\n# Hz S RI R 50\n[Number of Ports] 2\n[Two-Port Data Order] 21_12\n"
        "[Number of Frequencies] 20\n[Network Data]\n"
        + _rows(12, "0 0 0.5 0 0.5 0 0 0")
        + "[End]\n",
        "[Number of Frequencies] says 20 but the file has 12 data rows",
    ),
]


@pytest.mark.parametrize(
    ("case", "name", "content", "message"), HARDENING, ids=[h[0] for h in HARDENING]
)
def test_bad_touchstone_is_exit_2_with_a_message_and_nothing_written(
    capsys, tmp_path: Path, case: str, name: str, content: str, message: str
) -> None:
    path = _write(tmp_path, name, content)
    sub = tmp_path / "out.sub"
    code, _out, err = run(capsys, path, "--spice", sub)
    assert code == 2, err
    assert message in err and str(path) in err and "fix:" in err
    assert "Traceback" not in err and not sub.exists()
    assert "still written" not in err


def test_file_without_option_line_is_read_in_ghz_with_a_warning(capsys, tmp_path: Path) -> None:
    # Touchstone defaults GHz S MA R 50 (docs/references.md §6).
    z = _inductor(np.logspace(-2, 0, 30) * 1e9)
    s21 = shunt_through_s21(z)
    rows = "".join(
        f"{f:g} 0 0 {abs(s):.12g} {np.degrees(np.angle(s)):.12g} {abs(s):.12g} "
        f"{np.degrees(np.angle(s)):.12g} 0 0\n"
        for f, s in zip(np.logspace(-2, 0, 30), s21, strict=True)
    )
    path = _write(tmp_path, "bare.s2p", "! no option line\n" + rows)
    m = load_measurement(path)
    assert m.f[0] == pytest.approx(1e7) and m.f[-1] == pytest.approx(1e9)
    np.testing.assert_allclose(m.z, z, rtol=1e-9)
    assert any("no option line" in w and "GHz" in w for w in m.warnings)
    _code, _out, err = run(capsys, path)
    assert "warning:" in err and "Touchstone defaults" in err


def test_fifo_is_not_a_regular_file_and_is_never_opened(tmp_path: Path) -> None:
    fifo = tmp_path / "pipe.s2p"
    os.mkfifo(fifo)
    caught: list[BaseException] = []
    worker = threading.Thread(target=lambda: _catch(caught, fifo), daemon=True)
    worker.start()
    worker.join(60)
    if worker.is_alive():  # unblock a reader stuck on the FIFO, then fail
        with open(fifo, "w"):
            pass
        pytest.fail("reading a FIFO blocked")
    (error,) = caught
    assert isinstance(error, InputError) and "not a regular file" in str(error)


def _catch(caught: list[BaseException], path: Path) -> None:
    try:
        load_measurement(path)
    except BaseException as exc:
        caught.append(exc)


def test_size_bound_refuses_a_huge_file_before_reading(monkeypatch, tmp_path: Path) -> None:
    path = _write(tmp_path, "big.s2p", "# Hz S RI R 50\n" + _rows(200, "0 0 0.5 0 0.5 0 0 0"))
    monkeypatch.setattr(touchstone_scan, "MAX_FILE_BYTES", 1000)
    with pytest.raises(InputError, match="zbench reads") as info:
        load_measurement(path)
    assert "fix:" in str(info.value)


def test_version_2_files_read(tmp_path: Path) -> None:
    z = _inductor(F[:40])
    s21 = shunt_through_s21(z)
    rows = "".join(
        f"{float(f)!r} 0 0 {s.real:.17g} {s.imag:.17g} {s.real:.17g} {s.imag:.17g} 0 0\n"
        for f, s in zip(F[:40], s21, strict=True)
    )
    path = _write(
        tmp_path,
        "v2.s2p",
        "[Version] 2.0\n# Hz S RI R 50\n[Number of Ports] 2\n[Two-Port Data Order] 12_21\n"
        "[Number of Frequencies] 40\n[Network Data]\n" + rows + "[End]\n",
    )
    np.testing.assert_allclose(load_measurement(path).z, z, rtol=1e-9)
    zrows = "".join(
        f"{float(f)!r} {v.real:.17g} {v.imag:.17g}\n" for f, v in zip(F[:40], z, strict=True)
    )
    zpath = _write(
        tmp_path,
        "v2z.s1p",
        "[Version] 2.0\n# Hz Z RI R 50\n[Number of Ports] 1\n[Number of Frequencies] 40\n"
        "[Network Data]\n" + zrows + "[End]\n",
    )
    m = load_measurement(zpath)
    # Version 2.0 Z data are in ohms, not normalised (docs/references.md §6).
    assert m.kind == "impedance"
    np.testing.assert_allclose(m.z, z, rtol=1e-9)


def test_clashing_subcircuit_names_are_made_unique(capsys, tmp_path: Path) -> None:
    z = _inductor(F)
    a = _two_port(tmp_path / "a-b.s2p", series_through_s21(z), [method_comment("series-through")])
    b = _two_port(tmp_path / "a_b.s2p", series_through_s21(z), [method_comment("series-through")])
    lib = tmp_path / "parts.lib"
    code, _out, err = run(capsys, a, b, "--spice", lib)
    assert code in (0, 3), err
    names = [
        line.split()[1]
        for line in lib.read_text().splitlines()
        if line.lower().startswith(".subckt")
    ]
    assert names == ["a_b", "a_b_2"]


@pytest.mark.parametrize("code_", [errno.ENOSPC, errno.EROFS], ids=["disk full", "read-only"])
def test_unwritable_output_is_bad_input_not_a_traceback(
    monkeypatch, capsys, tmp_path: Path, code_: int
) -> None:
    import bench.batch as batch

    def refuse(path, text):
        raise OSError(code_, os.strerror(code_), str(path))

    monkeypatch.setattr(batch, "atomic_write_text", refuse)
    path = _two_port(
        tmp_path / "p.s2p", series_through_s21(_inductor(F)), [method_comment("series-through")]
    )
    code, _out, err = run(capsys, path, "--spice", tmp_path / "p.sub")
    assert code == 2, err
    assert f"cannot write {tmp_path / 'p.sub'}: {os.strerror(code_)}" in err
    assert "internal error" not in err and "Traceback" not in err


def test_two_port_z_file_of_a_shunt_part_reads_as_its_impedance(tmp_path: Path) -> None:
    # A shunt element's Z-matrix has every entry equal to Z (textbook two-port algebra);
    # version 1.x Z data are normalised to R (docs/references.md §6).
    z = _inductor(F[:40])
    rows = "".join(
        f"{float(f)!r} " + " ".join([f"{v.real / 50:.17g} {v.imag / 50:.17g}"] * 4) + "\n"
        for f, v in zip(F[:40], z, strict=True)
    )
    m = load_measurement(_write(tmp_path, "z2.s2p", "# Hz Z RI R 50\n" + rows))
    assert m.kind == "s2p" and m.method == "shunt-through"
    np.testing.assert_allclose(m.z, z, rtol=1e-9)
