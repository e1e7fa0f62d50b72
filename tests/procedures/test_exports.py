"""Per-run exports on a small run built in memory with the real impedance chain and fitter:
SPICE subcircuits and libraries, Touchstone Z and S, summary.csv with pass/fail, lot
statistics and the capacitance-versus-bias table."""

from __future__ import annotations

import csv
import dataclasses
import re
import shutil
import subprocess
from pathlib import Path

import numpy as np
import pytest

from bench import exports
from bench.results import PartSpec
from bench.touchstone import load_measurement


@pytest.fixture(scope="module")
def run_dir(summary, tmp_path_factory) -> tuple[Path, dict[str, list[Path]]]:
    folder = tmp_path_factory.mktemp("run")
    return folder, exports.write_exports(folder, summary)


def read_csv(path: Path) -> list[dict[str, str]]:
    """Rows keyed by column name (the headers' units, ``srf [Hz]``, taken off)."""
    with path.open(newline="", encoding="utf-8") as handle:
        rows = list(csv.DictReader(handle))
    return [{exports.csv_column(k): v for k, v in row.items()} for row in rows]


def subckt_blocks(text: str) -> dict[str, list[str]]:
    """{name: element lines} of every ``.subckt NAME 1 2`` … ``.ends`` block."""
    blocks = {}
    for match in re.finditer(
        r"^\.subckt\s+(\S+)\s+1\s+2\s*\n(.*?)^\.ends\b", text, flags=re.MULTILINE | re.DOTALL
    ):
        lines = [ln.strip() for ln in match.group(2).splitlines() if ln.strip()]
        blocks[match.group(1)] = lines
    return blocks


ELEMENT = re.compile(r"^[RLC]\w*\s+\w+\s+\w+\s+[0-9.eE+-]+$")


def test_every_fitted_sample_gets_a_subcircuit_that_parses(summary, run_dir):
    folder, written = run_dir
    fitted = [s for s in summary.samples if s.fit is not None]
    assert sorted(p.name for p in written["spice"]) == sorted(
        f"{exports.safe_filename(s.label)}.sub" for s in fitted
    )
    for sample in fitted:
        text = (folder / "models" / f"{exports.safe_filename(sample.label)}.sub").read_text()
        blocks = subckt_blocks(text)
        assert list(blocks) == [exports.sample_spice_name(sample)]
        for line in blocks[exports.sample_spice_name(sample)]:
            assert ELEMENT.match(line), line
        # Provenance of docs/design.md §4: run, part, sample, bias, raw file, software, date.
        for needle in (summary.run_id, sample.part, f"bias: {sample.bias_v:g} V", sample.raw_file):
            assert needle in text
        assert "zbench 0.1.0" in text and "date: 2026-01-01T12:00:00Z" in text
    # The sample whose fit failed has no model but still a summary row.
    assert not (folder / "models" / "ZBEX-C10U_s4.sub").exists()


def test_library_typical_is_the_median_sample(summary, run_dir):
    folder, written = run_dir
    assert sorted(p.name for p in written["library"]) == sorted(
        f"{exports.safe_filename(p.name)}.lib" for p in summary.parts
    )
    # The three MLCC samples at 0 V: the median c_low (numpy) picks the typical one.
    zero_bias = [
        s for s in summary.samples if s.part == "ZBEX-C10U" and s.fit is not None and s.bias_v == 0
    ]
    spec = summary.part("ZBEX-C10U")
    c_values = np.array([exports.main_landmark(spec, s)[1] for s in zero_bias])
    median_sample = zero_bias[int(np.flatnonzero(c_values == np.median(c_values))[0])]
    library = (folder / "models" / "ZBEX-C10U.lib").read_text()
    blocks = subckt_blocks(library)
    expected = {
        exports.sample_spice_name(s) for s in summary.samples if s.part == "ZBEX-C10U" and s.fit
    }
    assert set(blocks) == expected | {"ZBEX_C10U_typ"}
    assert blocks["ZBEX_C10U_typ"] == blocks[exports.sample_spice_name(median_sample)]
    assert f"well-determined fits by c_low: {median_sample.label}" in library


def test_typical_of_an_even_lot_is_a_real_sample(summary):
    typical = exports.typical_sample(summary, "ZBEX-L2U2")
    spec = summary.part("ZBEX-L2U2")
    lot = [s for s in summary.samples if s.part == "ZBEX-L2U2"]
    values = sorted(exports.main_landmark(spec, s)[1] for s in lot)
    assert exports.main_landmark(spec, typical)[1] == values[0]  # lower of the middle two


@pytest.mark.ngspice
@pytest.mark.skipif(shutil.which("ngspice") is None, reason="ngspice is not installed")
def test_libraries_load_in_ngspice(run_dir, tmp_path):
    _, written = run_dir
    for library in written["library"]:
        text = library.read_text()
        names = list(subckt_blocks(text))
        instances = "\n".join(
            f"X{i} n{i} 0 {name}\nV{i} n{i} 0 DC 0 AC 1" for i, name in enumerate(names)
        )
        deck = tmp_path / f"{library.stem}.cir"
        deck.write_text(f"library check\n.include {library}\n{instances}\n.op\n.end\n")
        done = subprocess.run(
            ["ngspice", "-b", str(deck)], capture_output=True, text=True, timeout=60
        )
        output = done.stdout + done.stderr
        assert done.returncode == 0, output
        assert "error" not in output.lower().replace("no error", ""), output


def test_touchstone_z_round_trips_and_s_only_when_kept(summary, run_dir):
    folder, written = run_dir
    names = {p.name for p in written["touchstone"]}
    for sample in summary.samples:
        stem = exports.safe_filename(sample.label)
        loaded = load_measurement(folder / "corrected" / f"{stem}.s1p")
        np.testing.assert_allclose(loaded.f, sample.data.f, rtol=1e-12)
        np.testing.assert_allclose(loaded.z, sample.data.z, rtol=1e-9)
        assert (f"{stem}.s2p" in names) == (sample.corrected_s is not None)
    kept = next(s for s in summary.samples if s.corrected_s is not None)
    s2p = load_measurement(folder / "corrected" / f"{exports.safe_filename(kept.label)}.s2p")
    np.testing.assert_allclose(s2p.s, kept.corrected_s, rtol=1e-9, atol=1e-15)
    # The measuring method goes with the data, so a re-fit reads it the same way.
    assert s2p.method == kept.data.window.method and s2p.method_source == "comments"
    # The impedance is a standard one-port Touchstone Z file, normalised as 1.x requires.
    text = (folder / "corrected" / f"{exports.safe_filename(kept.label)}.s1p").read_text()
    assert "# Hz Z RI R 50" in text and "normalised to R = 50 ohm" in text


def test_non_finite_points_are_left_out_of_the_z_file(summary, tmp_path):
    sample = next(s for s in summary.samples if s.fit is None)
    z = sample.data.z.copy()
    z[[3, 7]] = np.inf
    broken = dataclasses.replace(sample, data=dataclasses.replace(sample.data, z=z))
    run = dataclasses.replace(summary, samples=(broken,))
    written = exports.write_exports(tmp_path, run)
    (s1p,) = written["touchstone"]
    assert "2 points with a non-finite impedance left out" in s1p.read_text()
    loaded = load_measurement(s1p)
    assert loaded.f.size == sample.data.f.size - 2
    assert written["spice"] == [] and written["library"] == []


def test_summary_csv_columns_and_pass_fail(summary, run_dir):
    folder, _ = run_dir
    rows = read_csv(folder / "summary.csv")
    assert tuple(rows[0]) == exports.SUMMARY_COLUMNS
    assert len(rows) == len(summary.samples)
    for row, sample in zip(rows, summary.samples, strict=True):
        spec = summary.part(sample.part)
        assert (row["part"], row["sample"]) == (sample.part, sample.sample)
        assert float(row["bias_v"]) == sample.bias_v
        if not row["measured"]:
            # No model: the verdict asks for a check and says why.
            assert row["result"] == "CHECK" and sample.fit is None and row["fit_error"]
            assert "no model" in row["reason"]
            continue
        doubtful = not sample.fit.meets_quality
        measured = float(row["measured"])
        if spec.nominal is None:
            assert row["result"] == ("CHECK" if doubtful else "") and row["deviation"] == ""
            continue
        deviation = measured / spec.nominal - 1
        assert float(row["deviation"]) == pytest.approx(deviation, rel=1e-6, abs=1e-7)
        if doubtful:
            assert row["result"] == "CHECK" and "quality bound" in row["reason"]
        elif sample.bias_v:
            assert row["result"] == ""  # nominal values are stated without bias
        else:
            expected = "PASS" if abs(deviation) <= spec.tolerance else "FAIL"
            assert row["result"] == expected
            assert "vs nominal" in row["reason"]
    results = {(r["part"], r["sample"], r["bias_v"]): r["result"] for r in rows}
    # Invented lot (run_summary_data.py): s3 is 11.5 µF against 10 µF ± 10 %.
    assert results[("ZBEX-C10U", "s3", "0")] == "FAIL"
    assert results[("ZBEX-C10U", "s1", "0")] == "PASS"
    assert results[("ZBEX-P330U", "s1", "0")] == ""


def test_bead_main_landmark_is_measured_z_at_the_nominal_frequency(summary):
    bead = next(s for s in summary.samples if s.part == "ZBEX-F600")
    name, value = exports.main_landmark(summary.part("ZBEX-F600"), bead)
    assert name == "z_at_nominal_hz"
    f, mag = bead.data.f, np.abs(bead.data.z)
    i = int(np.searchsorted(f, 100e6))
    # Log-log interpolation between the two neighbouring points.
    t = np.log(100e6 / f[i - 1]) / np.log(f[i] / f[i - 1])
    expected = np.exp(np.log(mag[i - 1]) + t * np.log(mag[i] / mag[i - 1]))
    assert value == pytest.approx(expected, rel=1e-9)


def test_verdict_logic_at_the_limits():
    spec = PartSpec(name="P", kind="mlcc", nominal=10e-6, tolerance=0.1)
    assert exports.verdict(spec, 11e-6)[1] == "pass"  # exactly +10 %
    assert exports.verdict(spec, 8.99e-6)[1] == "fail"
    assert exports.verdict(spec, 10e-6, bias_v=2.0)[1] == ""
    assert exports.verdict(PartSpec(name="Q", kind="mlcc", nominal=1e-6), 1e-6) == (0.0, "")
    assert exports.verdict(PartSpec(name="R", kind="bulk"), 1e-6) == (None, "")


def test_lot_statistics_against_numpy(summary, run_dir):
    from bench.verdicts import kind_of, shown_landmarks

    stats = exports.lot_statistics(summary)
    for part, by_bias in stats.items():
        for bias, landmarks in by_bias.items():
            for key, got in landmarks.items():
                if key == "z_at_nominal_hz":
                    continue
                # The shown landmarks, the values summary.csv gives.
                values = np.array(
                    [
                        shown_landmarks(s, kind_of(summary.part(part)))[key]
                        for s in summary.samples
                        if s.part == part and s.bias_v == bias and s.fit is not None
                    ]
                )
                assert got.n == values.size
                assert got.mean == pytest.approx(np.mean(values), rel=1e-12)
                assert got.min == np.min(values) and got.max == np.max(values)
                if values.size > 1:
                    assert got.std == pytest.approx(np.std(values, ddof=1), rel=1e-12)
                else:
                    assert np.isnan(got.std)
    assert stats["ZBEX-C10U"][0.0]["c_low"].n == 3  # the failed fit is left out
    folder, _ = run_dir
    rows = read_csv(folder / "lot_statistics.csv")
    row = next(
        r
        for r in rows
        if r["part"] == "ZBEX-C10U" and r["landmark"] == "c_low" and r["bias_v"] == "0"
    )
    assert float(row["mean"]) == pytest.approx(stats["ZBEX-C10U"][0.0]["c_low"].mean, rel=1e-5)
    assert row["unit"] == "F"


def test_bias_table_and_csv(summary, summary_data, run_dir):
    table = exports.bias_table(summary)
    assert list(table) == ["ZBEX-C10U"]  # the only part measured at several bias points
    points = {(p.sample, p.bias_v): p for p in table["ZBEX-C10U"]}
    for sample in ("s1", "s2"):
        low, high = points[(sample, 0.0)], points[(sample, summary_data.MLCC_BIAS)]
        assert low.change == 0.0
        assert high.change == pytest.approx(high.c_low / low.c_low - 1, rel=1e-12)
        # Class II ceramic of the simulator: C(V) = C0/(1 + (V/V50)²) with V50 = 0.42·6.3 V
        # (simulated_instruments/parts.py); a fit reads about that loss, within a few %.
        assert high.change == pytest.approx(1 / (1 + (3.0 / (0.42 * 6.3)) ** 2) - 1, abs=0.03)
    folder, written = run_dir
    assert [p.name for p in written["bias"]] == ["ZBEX-C10U_bias.csv"]
    rows = read_csv(folder / "models" / "ZBEX-C10U_bias.csv")
    assert list(rows[0]) == ["sample", "bias_v", "c_low", "change"]
    assert len(rows) == len(table["ZBEX-C10U"])


def test_names_are_safe_for_files_and_spice():
    assert exports.safe_filename("A/B C:1") == "A_B_C_1"
    assert exports.spice_name("MC-1_s1_4.5V") == "MC_1_s1_4p5V"
    assert exports.spice_name("10u") == "P_10u"


def test_summary_gives_the_change_from_zero_volts_at_bias_points(summary, run_dir):
    folder, _ = run_dir
    rows = read_csv(folder / "summary.csv")
    zero = {(r["part"], r["sample"]): r for r in rows if float(r["bias_v"]) == 0.0}
    biased = [r for r in rows if float(r["bias_v"]) != 0.0 and r["measured"]]
    assert biased, "the invented lot has bias points"
    for row in biased:
        reference = float(zero[(row["part"], row["sample"])]["measured"])
        expected = float(row["measured"]) / reference - 1.0
        assert float(row["change_from_0v"]) == pytest.approx(expected, rel=1e-6, abs=1e-9)
        assert row["result"] == ""
    assert all(r["change_from_0v"] == "" for r in zero.values())


def test_corrected_files_state_the_port_series_resistors(summary, tmp_path):
    from bench.commands.fit import series_r_from_comments

    setup = {**summary.setup, "fixture": {"series_r": 499.0}}
    run = dataclasses.replace(summary, setup=setup)
    written = exports.write_exports(tmp_path, run)
    assert written["touchstone"]
    for path in written["touchstone"]:
        # zbench fit reads this back, so a re-fit of the S file uses the same set-up.
        assert "port series resistors: 499 ohm each" in path.read_text()
        assert series_r_from_comments(load_measurement(path).comments) == 499.0


def test_values_read_from_the_data_skip_the_points_the_fit_screened_out(summary):
    import dataclasses

    from bench.verdicts import z_at_frequencies

    bead = next(s for s in summary.samples if s.part == "ZBEX-F600")
    spec = summary.part("ZBEX-F600")
    f = bead.data.f
    i = int(np.searchsorted(f, 100e6))  # the point just above the stated frequency
    z = np.array(bead.data.z, dtype=complex)
    z[i] *= 3.0  # a glitch there, which the fit screened out
    status = np.full(f.size, "used", dtype=object)
    status[i] = "glitch"
    glitched = dataclasses.replace(
        bead,
        data=dataclasses.replace(bead.data, z=z),
        fit=dataclasses.replace(bead.fit, point_status=tuple(status)),
    )
    # Read past the glitch: between the points on either side of it, not through it.
    t = np.log(100e6 / f[i - 1]) / np.log(f[i + 1] / f[i - 1])
    mag = np.abs(bead.data.z)
    expected = np.exp(np.log(mag[i - 1]) + t * np.log(mag[i + 1] / mag[i - 1]))
    assert exports.main_landmark(spec, glitched)[1] == pytest.approx(expected, rel=1e-9)
    assert z_at_frequencies(glitched, spec)[100e6] == pytest.approx(expected, rel=1e-9)
