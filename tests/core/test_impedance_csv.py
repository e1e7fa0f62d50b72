"""Impedance analysers' CSV exports: every accepted form, and malformed files."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

from bench.errors import InputError
from bench.touchstone import load_measurement

F = np.logspace(3, 8, 21)
# An invented MLCC: 1 µF, 5 mΩ, 0.8 nH.
Z = 0.005 + 1 / (2j * np.pi * F * 1e-6) + 2j * np.pi * F * 0.8e-9


def _table(header: str, delimiter: str, columns, *, decimal_comma: bool = False) -> str:
    lines = [header]
    for row in zip(*columns, strict=True):
        cells = [repr(float(v)) for v in row]
        if decimal_comma:
            cells = [c.replace(".", ",") for c in cells]
        lines.append(delimiter.join(cells))
    return "\n".join(lines) + "\n"


FORMS = [
    # (header, delimiter, columns from (f, z), decimal comma)
    (
        "Frequency [Hz],|Z| [Ohm],Phase [deg]",
        ",",
        lambda f, z: (f, abs(z), np.degrees(np.angle(z))),
        False,
    ),
    (
        "frequency (kHz),|z| (ohm),phase (rad)",
        ",",
        lambda f, z: (f / 1e3, abs(z), np.angle(z)),
        False,
    ),
    ("Freq MHz;R Ohm;X Ohm", ";", lambda f, z: (f / 1e6, z.real, z.imag), True),
    ("FREQUENCY [GHz]\tReal [Ω]\tImag [Ω]", "\t", lambda f, z: (f / 1e9, z.real, z.imag), False),
    (
        "Frequency Hz;|Z| kOhm;Phase deg",
        ";",
        lambda f, z: (f, abs(z) / 1e3, np.degrees(np.angle(z))),
        False,
    ),
    (
        '"Frequency [Hz]","R [mOhm]","X [mOhm]"',
        ",",
        lambda f, z: (f, z.real * 1e3, z.imag * 1e3),
        False,
    ),
    (
        "freq_MHz\t|Z|_ohm\tphase_deg",
        "\t",
        lambda f, z: (f / 1e6, abs(z), np.degrees(np.angle(z))),
        False,
    ),
]


def _w(f):
    return 2 * np.pi * f


def _y(z):
    return 1 / z


# An analyser's equivalent-circuit readings of the same impedance, signed as analysers
# report them above a resonance (a negative Cs, a negative Ls below it).
EQUIVALENT_FORMS = [
    ("Frequency [Hz],Cs [uF],Rs [Ohm]", lambda f, z: (f, -1e6 / (_w(f) * z.imag), z.real)),
    ("Frequency [Hz],Cs [F],D", lambda f, z: (f, -1 / (_w(f) * z.imag), -z.real / z.imag)),
    ("Frequency [Hz],Cs [nF],Q [1]", lambda f, z: (f, -1e9 / (_w(f) * z.imag), -z.imag / z.real)),
    (
        "Frequency [Hz],Cp [pF],Rp [kOhm]",
        lambda f, z: (f, 1e12 * _y(z).imag / _w(f), 1e-3 / _y(z).real),
    ),
    ("Frequency [Hz],Cp [F],D", lambda f, z: (f, _y(z).imag / _w(f), _y(z).real / _y(z).imag)),
    ("Frequency [Hz],Cp [F],Q", lambda f, z: (f, _y(z).imag / _w(f), _y(z).imag / _y(z).real)),
    ("Frequency [Hz],Ls [nH],Rs [mOhm]", lambda f, z: (f, 1e9 * z.imag / _w(f), 1e3 * z.real)),
    ("Frequency [Hz],Ls [H],Q", lambda f, z: (f, z.imag / _w(f), z.imag / z.real)),
    ("Frequency [Hz],Ls [H],D", lambda f, z: (f, z.imag / _w(f), z.real / z.imag)),
    (
        "Frequency [Hz],Lp [uH],Rp [Ohm]",
        lambda f, z: (f, -1e6 / (_w(f) * _y(z).imag), 1 / _y(z).real),
    ),
    (
        "Frequency [Hz],Lp [H],Q",
        lambda f, z: (f, -1 / (_w(f) * _y(z).imag), -_y(z).imag / _y(z).real),
    ),
    (
        "Frequency [Hz],Lp [H],tan delta",
        lambda f, z: (f, -1 / (_w(f) * _y(z).imag), -_y(z).real / _y(z).imag),
    ),
]


@pytest.mark.parametrize(
    ("header", "columns"), EQUIVALENT_FORMS, ids=[f[0] for f in EQUIVALENT_FORMS]
)
def test_equivalent_circuit_columns_read_the_same_impedance(
    tmp_path: Path, header: str, columns
) -> None:
    path = tmp_path / "part.csv"
    path.write_text(_table(header, ",", columns(F, Z)))
    m = load_measurement(path)
    np.testing.assert_allclose(m.z, Z, rtol=1e-9)


def test_a_capacitance_with_its_dissipation_factor_by_hand(tmp_path: Path) -> None:
    # 10 nF with D = 0.01 at 1 kHz: Rs = D/(ωC) = 0.01/(2π·1e3·1e-8) = 159.155 Ω and
    # Xs = −1/(ωC) = −15 915.5 Ω (the definition D = ωCs·Rs, worked by hand).
    path = tmp_path / "c.csv"
    rows = "".join(f"{k},10,0.01\n" for k in range(1, 13))
    path.write_text("Frequency [kHz],Cs [nF],D\n" + rows)
    m = load_measurement(path)
    assert m.z[0].real == pytest.approx(159.155, rel=1e-5)
    assert m.z[0].imag == pytest.approx(-15915.49, rel=1e-6)


@pytest.mark.parametrize(
    ("header", "delimiter", "columns", "comma"), FORMS, ids=[f[0] for f in FORMS]
)
def test_every_accepted_form_reads_the_same_impedance(
    tmp_path: Path, header: str, delimiter: str, columns, comma: bool
) -> None:
    path = tmp_path / "part.csv"
    path.write_text(
        "# exported by an analyser\n"
        + _table(header, delimiter, columns(F, Z), decimal_comma=comma)
    )
    m = load_measurement(path)
    assert m.kind == "impedance" and m.method is None
    np.testing.assert_allclose(m.f, F, rtol=1e-12)
    np.testing.assert_allclose(m.z, Z, rtol=1e-9)
    assert "exported by an analyser" in m.comments


def _good_rows(n: int = 12) -> str:
    return "".join(f"{1e3 * (k + 1):g},{1 + k:g},-45\n" for k in range(n))


MALFORMED = [
    # (name, content, expected message, line, expected fix)
    ("no header", _good_rows(), "no header row", 1, "Frequency [Hz],|Z| [Ohm],Phase [deg]"),
    (
        "unknown column",
        "Frequency [Hz],|Z| [Ohm],Temperature [C]\n" + _good_rows(),
        "unknown column 'Temperature [C]'",
        1,
        "name the columns",
    ),
    (
        "missing unit",
        "Frequency,|Z| [Ohm],Phase [deg]\n" + _good_rows(),
        "column 'Frequency' has no unit",
        1,
        "unit in brackets",
    ),
    (
        "wrong unit",
        "Frequency [Hz],|Z| [F],Phase [deg]\n" + _good_rows(),
        "unit 'F' is not one",
        1,
        "ohm",
    ),
    (
        "text in a number",
        "Frequency [Hz],|Z| [Ohm],Phase [deg]\n" + _good_rows(4) + "5e3,abc,-45\n" + _good_rows(8),
        "'abc' in column '|Z| [Ohm]' is not a number",
        6,
        "only numbers",
    ),
    (
        "short row",
        "Frequency [Hz],|Z| [Ohm],Phase [deg]\n" + _good_rows(3) + "4e3,2\n",
        "has 2 fields where the header has 3",
        5,
        "header's columns",
    ),
    (
        "no pair",
        "Frequency [Hz],|Z| [Ohm],X [Ohm]\n" + _good_rows(),
        "needs a frequency and one pair",
        1,
        "three columns",
    ),
    (
        "decimal comma with commas",
        "Frequency [Hz],|Z| [Ohm],Phase [deg]\n1000,1,5,-45\n",
        "has 4 fields",
        2,
        "decimal comma needs ';'",
    ),
    ("empty", "\n# only a comment\n", "no header row and no data", None, "header row"),
]


@pytest.mark.parametrize(
    ("case", "content", "message", "line", "fix"), MALFORMED, ids=[m[0] for m in MALFORMED]
)
def test_malformed_files_name_file_line_and_fix(
    tmp_path: Path, case: str, content: str, message: str, line: int | None, fix: str
) -> None:
    path = tmp_path / "bad.csv"
    path.write_text(content)
    with pytest.raises(InputError) as info:
        load_measurement(path)
    text = str(info.value)
    where = f"{path}:{line}:" if line is not None else f"{path}:"
    assert text.startswith(where), text
    assert message in text and "fix:" in text and fix in text
    assert info.value.exit_code == 2


def test_an_all_zero_csv_is_refused_truthfully(tmp_path: Path) -> None:
    path = tmp_path / "zero.csv"
    path.write_text(
        "Frequency [Hz],R [Ohm],X [Ohm]\n" + "".join(f"{1e3 * (k + 1):g},0,0\n" for k in range(12))
    )
    with pytest.raises(InputError, match="nothing was fitted or written"):
        load_measurement(path)


def test_a_repeated_row_is_read_once_as_the_mean(tmp_path: Path) -> None:
    f = np.concatenate([F[:11], F[10:]])
    z = Z[np.r_[0:11, 10 : F.size]].copy()
    z[11] *= 1.002
    path = tmp_path / "segments.csv"
    path.write_text(_table("f (Hz),R (Ohm),X (Ohm)", ",", (f, z.real, z.imag)))
    m = load_measurement(path)
    np.testing.assert_allclose(m.f, F, rtol=1e-14)
    np.testing.assert_allclose(m.z[10], 0.5 * (z[10] + z[11]), rtol=1e-12)
    assert any("1 repeated frequency" in w for w in m.warnings)


def test_a_frequency_unit_that_does_not_match_the_values_is_refused(tmp_path: Path) -> None:
    path = tmp_path / "ghz.csv"
    # Hz values under a header saying GHz.
    path.write_text(_table("f (GHz),R (Ohm),X (Ohm)", ",", (F, Z.real, Z.imag)))
    with pytest.raises(InputError, match="far beyond any network analyser") as info:
        load_measurement(path)
    assert str(path) in str(info.value) and "header" in str(info.value)


def test_a_table_from_the_top_frequency_down_is_read_in_increasing_order(tmp_path: Path) -> None:
    path = tmp_path / "down.csv"
    path.write_text(_table("f (Hz),R (Ohm),X (Ohm)", ",", (F[::-1], Z.real[::-1], Z.imag[::-1])))
    m = load_measurement(path)
    np.testing.assert_array_equal(m.f, F)
    np.testing.assert_allclose(m.z, Z, rtol=1e-14)
    assert any("from its top frequency down" in w for w in m.warnings)


def test_non_passive_points_clustered_at_resonance_are_left_out(tmp_path: Path) -> None:
    # An analyser's table (no set-up known: weighted by its own scatter) of an invented
    # 2.2 µF MLCC, 4 mΩ, 0.6 nH (series resonance 4.38 MHz, X = ωL − 1/(ωC), docs/
    # references.md §3), 0.3 % noise, with three points near resonance whose Re Z came
    # out negative (calibration residue): each is left out, and the fit holds the noise.
    from bench.api import fit, load

    rng = np.random.default_rng(3)
    f = np.geomspace(100, 1e8, 401)
    w = 2 * np.pi * f
    z = (4e-3 + 1j * w * 0.6e-9 + 1 / (1j * w * 2.2e-6)) * (
        1 + 0.003 * (rng.normal(size=f.size) + 1j * rng.normal(size=f.size)) / np.sqrt(2)
    )
    at = int(np.argmin(np.abs(z)))
    bad = [at - 3, at + 2, at + 5]
    z[bad] = -1.5 * np.abs(z[bad].real) + 1j * z[bad].imag
    path = tmp_path / "residue.csv"
    path.write_text(_table("f (Hz),R (Ohm),X (Ohm)", ",", (f, z.real, z.imag)))
    result = fit(load(path))
    left = [e for e in result.excluded if e.reason == "negative-resistance"]
    assert len(left) == 1 and left[0].count == 3
    assert left[0].f_lo == pytest.approx(f[bad[0]]) and left[0].f_hi == pytest.approx(f[bad[-1]])
    assert result.meets_quality and result.quality.noise_ratio < 1.5
    assert result.landmarks["esr_at_srf"] == pytest.approx(4e-3, rel=0.1)
