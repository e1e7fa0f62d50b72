"""The ``zbench fit`` contract (docs/design.md §3): JSON keys in SI units, JSON Lines for several
files, SPICE output, exit codes, and a clear message without a traceback for each bad
input the command must refuse."""

from __future__ import annotations

import json
import re
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
import skrf

from bench import api
from bench.cli import main
from bench.touchstone import write_touchstone_s, write_touchstone_z

ROOT = Path(__file__).resolve().parents[2]
EXAMPLES = ROOT / "examples"
MLCC = EXAMPLES / "mlcc_22u.s2p"
MOUNT = EXAMPLES / "mount_short.s2p"
BULK = EXAMPLES / "bulk_330u.s2p"
INDUCTOR = EXAMPLES / "inductor_2u2.s2p"
BEAD = EXAMPLES / "bead_600r.s1p"

QUALITY_KEYS = {"rms_log_error", "max_abs_log_error", "points_used", "points_outside_window"}


def run(capsys: pytest.CaptureFixture[str], *args: object) -> tuple[int, str, str]:
    code = main(["fit", *map(str, args)])
    out, err = capsys.readouterr()
    return code, out, err


def json_lines(text: str) -> list[dict]:
    return [json.loads(line) for line in text.splitlines() if line.strip()]


def shunt_s2p(path: Path, f: np.ndarray, z: np.ndarray, series_r: float = 0.0) -> Path:
    """A calibrated shunt-through file of impedance ``z`` (docs/design.md §4 relation)."""
    s21 = 2 * z / (2 * z + 50.0 + series_r)
    s = np.empty((f.size, 2, 2), dtype=complex)
    s[:, 0, 0] = s[:, 1, 1] = s21 - 1
    s[:, 0, 1] = s[:, 1, 0] = s21
    return write_touchstone_s(path, f, s)


def rlc(f: np.ndarray, r: float = 5e-3, l: float = 0.5e-9, c: float = 10e-6) -> np.ndarray:  # noqa: E741
    w = 2 * np.pi * f
    return r + 1j * w * l + 1 / (1j * w * c)


# ----------------------------------------------------------------------------- success


def test_json_object_has_the_design_keys_in_si_units(capsys):
    code, out, err = run(capsys, BULK, "--json")
    assert code in (0, 3), err
    (record,) = json_lines(out)
    assert {"model", "elements", "landmarks", "quality", "spice"} <= set(record)
    assert record["spice"] is None
    assert set(record["quality"]) >= QUALITY_KEYS
    assert record["model"] == "ladder"
    # SI units: c_low in farads (330 µF invented part of examples/make_examples.py), not µF.
    assert record["landmarks"]["c_low"] == pytest.approx(330e-6, rel=0.05)
    assert record["landmarks"]["esl"] == pytest.approx(2.2e-9, rel=0.15)
    assert all(isinstance(v, float) and v > 0 for v in record["elements"].values())
    assert record["quality"]["points_used"] > 100


def test_mount_removal_changes_the_low_impedance_landmarks(capsys):
    code, out, err = run(capsys, MLCC, "--mount", MOUNT, "--json")
    assert code in (0, 3), err
    with_mount = json_lines(out)[0]
    code, out, err = run(capsys, MLCC, "--json")
    without = json_lines(out)[0]
    # The example mount is 0.08 nH (invented, make_examples.py): removing it lowers ESL by it.
    drop = without["landmarks"]["esl"] - with_mount["landmarks"]["esl"]
    assert drop == pytest.approx(0.08e-9, rel=0.3)


def test_several_files_give_json_lines_in_order(capsys):
    code, out, err = run(capsys, BULK, INDUCTOR, "--series-r", "499", "--json")
    assert code in (0, 3), err
    records = json_lines(out)
    assert [r["file"] for r in records] == [str(BULK), str(INDUCTOR)]
    assert len(out.strip().splitlines()) == 2
    assert "l_low" in records[1]["landmarks"]
    # 2.2 µH invented inductor of make_examples.py, measured with 499 Ω resistors.
    assert records[1]["landmarks"]["l_low"] == pytest.approx(2.2e-6, rel=0.05)


def test_series_r_accepts_si_prefixes(capsys):
    _, plain, _ = run(capsys, INDUCTOR, "--series-r", "499", "--json")
    _, prefixed, _ = run(capsys, INDUCTOR, "--series-r", "0.499k", "--json")
    assert json_lines(plain)[0]["landmarks"] == json_lines(prefixed)[0]["landmarks"]


def test_series_r_stated_in_the_file_comments_is_used(capsys, tmp_path):
    # The example states "port series resistors: 499 ohm each" in its comments.
    _, stated, err = run(capsys, INDUCTOR, "--json")
    _, given, _ = run(capsys, INDUCTOR, "--series-r", "499", "--json")
    assert json_lines(stated)[0]["landmarks"] == json_lines(given)[0]["landmarks"]
    assert "port series resistors 499 Ω each, as its comments state" in err
    # An explicit --series-r wins over the comments, with a warning that they disagree.
    _, plain, err = run(capsys, INDUCTOR, "--series-r", "0", "--json")
    assert "as its comments state" not in err
    assert "--series-r 0 ohm contradicts the file's comments, which state 499 ohm" in err
    # Derived: the same S21 read with Ze = 50 Ω instead of 549 Ω scales Z by 50/549.
    ratio = json_lines(plain)[0]["landmarks"]["l_low"] / json_lines(given)[0]["landmarks"]["l_low"]
    assert ratio == pytest.approx(50.0 / 549.0, rel=0.05)


def test_series_r_comment_forms():
    from bench.commands.fit import series_r_from_comments

    assert series_r_from_comments("zbench: A s1\nport series resistors: 499 ohm each") == 499.0
    assert series_r_from_comments("with 1e3 ohm in series at each port") == 1000.0
    assert series_r_from_comments("Port series resistor = 49.9 Ω") == 49.9
    assert series_r_from_comments("fixture-removed impedance (ohm)") is None


def test_fmin_fmax_limit_the_points_used(capsys):
    code, out, err = run(capsys, BULK, "--fmin", "1 kHz", "--fmax", "10MHz", "--json")
    assert code in (0, 3), err
    f = skrf.Network(str(BULK)).f
    expected = int(np.count_nonzero((f >= 1e3) & (f <= 1e7)))
    quality = json_lines(out)[0]["quality"]
    assert quality["points_used"] + quality["points_outside_window"] <= expected


def test_readable_summary_without_json(capsys):
    code, out, err = run(capsys, BEAD, "--series-r", "499")
    assert code in (0, 3), err
    assert str(BEAD) in out
    assert "landmarks:" in out and "z_at_srf" in out and "Ω" in out
    # Elements the data cannot pin (one sigma beyond 100 %) say so instead of a number.
    assert not re.search(r"±\d[\d.]*e\+", out)
    assert "bead (inductor)" in out  # the kind is named when the family does not say it
    # The error against what the points' uncertainty predicts, beside the RMS error.
    assert re.search(r"RMS complex-log error [\d.e-]+ \([\d.e+-]+ × the noise\)", out)
    with pytest.raises(json.JSONDecodeError):
        json.loads(out)


def test_spice_for_one_file_is_that_file(capsys, tmp_path):
    target = tmp_path / "bulk.sub"
    code, out, err = run(capsys, BULK, "--spice", target, "--json")
    assert code in (0, 3), err
    assert json_lines(out)[0]["spice"] == str(target)
    text = target.read_text()
    assert ".subckt bulk_330u 1 2" in text.lower()
    assert ".ends" in text.lower()


def test_spice_names_the_mount_file_not_its_data(capsys, tmp_path):
    target = tmp_path / "mlcc.sub"
    code, _, err = run(capsys, MLCC, "--mount", MOUNT, "--spice", target)
    assert code in (0, 3), err
    comments = [line for line in target.read_text().splitlines() if line.startswith("*")]
    mount_lines = [line for line in comments if line.startswith("* mount:")]
    assert mount_lines == [f"* mount: {MOUNT}"]
    assert all(len(line) < 300 for line in comments)


def test_spice_for_several_files_is_a_folder_or_a_library(capsys, tmp_path):
    folder = tmp_path / "models"
    code, out, err = run(capsys, BULK, MLCC, "--spice", folder, "--json")
    assert code in (0, 3), err
    assert sorted(p.name for p in folder.iterdir()) == ["bulk_330u.sub", "mlcc_22u.sub"]
    assert [r["spice"] for r in json_lines(out)] == [
        str(folder / "bulk_330u.sub"),
        str(folder / "mlcc_22u.sub"),
    ]
    library = tmp_path / "parts.lib"
    code, out, err = run(capsys, BULK, MLCC, "--spice", library, "--json")
    assert code in (0, 3), err
    assert [r["spice"] for r in json_lines(out)] == [str(library)] * 2
    text = library.read_text().lower()
    assert text.count(".subckt") == 2 and "bulk_330u" in text and "mlcc_22u" in text


def test_quality_bound_not_met_exits_3_and_still_writes(capsys, tmp_path):
    # A two-resonance impedance forced into a single series R-L-C cannot be fitted well.
    f = np.logspace(3, 8.5, 201)
    z = 1 / (1 / rlc(f, 2e-3, 0.5e-9, 10e-6) + 1 / rlc(f, 0.05, 0.05e-9, 0.2e-6))
    path = shunt_s2p(tmp_path / "two_resonances.s2p", f, z)
    target = tmp_path / "forced.sub"
    code, out, err = run(capsys, path, "--model", "series-rlc", "--spice", target, "--json")
    assert code == 3, err
    assert json_lines(out)[0]["model"] == "series-rlc"
    assert target.exists()
    assert "quality" in err and "Traceback" not in err


def test_internal_error_exits_1_without_traceback(capsys, monkeypatch):
    def broken(*args, **kwargs):
        raise RuntimeError("simulated failure inside the fitter")

    monkeypatch.setattr(api, "fit", broken)
    code, _out, err = run(capsys, BULK)
    assert code == 1
    assert "internal error" in err and "Traceback" not in err


# ----------------------------------------------------------------------------- bad input


def write_text(path: Path, text: str) -> Path:
    path.write_text(text)
    return path


def s2p_lines(freqs, value="0.5 0.0") -> str:
    row = " ".join([value] * 4)
    return "# Hz S RI R 50\n" + "".join(f"{f:g} {row}\n" for f in freqs)


def bad_cases(tmp_path: Path) -> dict[str, tuple[list[object], str]]:
    f = np.logspace(3, 8, 50)
    ok = shunt_s2p(tmp_path / "ok.s2p", f, rlc(f))
    three = skrf.Network(frequency=skrf.Frequency.from_f(f, unit="Hz"), s=np.zeros((50, 3, 3)))
    three.write_touchstone(str(tmp_path / "three"))
    one_s = skrf.Network(frequency=skrf.Frequency.from_f(f, unit="Hz"), s=np.full((50, 1, 1), 0.5))
    one_s.write_touchstone(str(tmp_path / "one_s"))
    freqs = list(np.logspace(3, 8, 20))
    freqs[7], freqs[8] = freqs[8], freqs[7]
    nan_text = s2p_lines(np.logspace(3, 8, 20)).splitlines()
    nan_text[5] = nan_text[5].split()[0] + " nan 0 0.5 0 0.5 0 0.5 0"
    narrow = shunt_s2p(tmp_path / "narrow_mount.s2p", f[10:40], np.full(30, 1e-4 + 0j))
    return {
        "missing file": ([tmp_path / "absent.s2p"], "not found"),
        "not touchstone": (
            [write_text(tmp_path / "notes.s2p", "this is a lab note, not data\n")],
            "Touchstone",
        ),
        "three ports": ([tmp_path / "three.s3p"], "3 ports"),
        "one-port S": (
            [tmp_path / "one_s.s1p", "--method", "shunt-through"],
            "is a one-port file, so it holds a reflection",
        ),
        "frequencies not increasing": (
            [write_text(tmp_path / "order.s2p", s2p_lines(freqs))],
            "not strictly increasing",
        ),
        "NaN values": ([write_text(tmp_path / "nan.s2p", "\n".join(nan_text) + "\n")], "NaN"),
        "too few points": (
            [write_text(tmp_path / "few.s2p", s2p_lines(np.logspace(3, 8, 5)))],
            "at least",
        ),
        "mount on a narrower grid": ([ok, "--mount", narrow], "will not extrapolate"),
        "model of the other family": ([ok, "--model", "bead"], "capacitive"),
        "unknown model": ([ok, "--model", "lumped"], "two-branch"),
        "bad SI value": ([ok, "--fmax", "200 MV"], "fmax"),
    }


CASES = [
    "missing file",
    "not touchstone",
    "three ports",
    "one-port S",
    "frequencies not increasing",
    "NaN values",
    "too few points",
    "mount on a narrower grid",
    "model of the other family",
    "unknown model",
    "bad SI value",
]


@pytest.mark.parametrize("case", CASES)
def test_bad_input_exits_2_with_a_message_naming_the_file(capsys, tmp_path, case):
    args, expected = bad_cases(tmp_path)[case]
    code, out, err = run(capsys, *args)
    assert code == 2, (case, err)
    assert expected in err, err
    assert "Traceback" not in err
    assert out.strip() == ""
    if case not in ("unknown model", "bad SI value"):
        # The message names the file at fault.
        culprit = args[2] if case.startswith("mount") else args[0]
        assert str(culprit) in err
    assert "fix:" in err


def test_mount_on_another_wider_grid_is_interpolated(capsys, tmp_path):
    f = np.logspace(3, 8, 120)
    mount_f = np.linspace(500.0, 2e8, 400)  # another grid that covers the measurement's
    part = shunt_s2p(tmp_path / "part.s2p", f, rlc(f) + 0.2e-3 + 2j * np.pi * f * 0.1e-9)
    mount = shunt_s2p(tmp_path / "mount.s2p", mount_f, 0.2e-3 + 2j * np.pi * mount_f * 0.1e-9)
    code, out, err = run(capsys, part, "--mount", mount, "--json")
    assert code in (0, 3), err
    # Invented truth of this test: 0.5 nH once the 0.1 nH mount is removed.
    assert json_lines(out)[0]["landmarks"]["esl"] == pytest.approx(0.5e-9, rel=0.05)


def test_a_bad_file_does_not_stop_the_others(capsys, tmp_path):
    code, out, err = run(capsys, tmp_path / "absent.s2p", BULK, "--json")
    assert code == 2
    assert [r["file"] for r in json_lines(out)] == [str(BULK)]
    assert "absent.s2p" in err


def test_console_entry_point_gives_no_traceback(tmp_path):
    missing = tmp_path / "absent.s2p"
    done = subprocess.run(
        [sys.executable, "-m", "bench.cli", "fit", str(missing)],
        capture_output=True,
        text=True,
        cwd=ROOT,
        timeout=120,
    )
    assert done.returncode == 2
    assert str(missing) in done.stderr and "fix:" in done.stderr
    assert "Traceback" not in done.stderr


def test_one_port_z_file_round_trip(capsys, tmp_path):
    f = np.logspace(3, 8, 150)
    path = write_touchstone_z(tmp_path / "part.s1p", f, rlc(f))
    code, out, err = run(capsys, path, "--json")
    assert code in (0, 3), err
    landmarks = json_lines(out)[0]["landmarks"]
    # Invented noiseless truth of this test: 10 µF, 0.5 nH; f0 = 1/(2π√(LC)) = 2.2508 MHz
    # (docs/references.md §3, derived check value for 10 µF / 0.5 nH / 5 mΩ).
    assert landmarks["c_low"] == pytest.approx(10e-6, rel=0.02)
    assert landmarks["srf"] == pytest.approx(2.2508e6, rel=0.01)


# ----------------------------------------------------------------------------- hints


def test_an_unnormalised_file_gets_a_hint(tmp_path, capsys):
    f = np.logspace(2, 8, 121)
    path = shunt_s2p(tmp_path / "good.s2p", f, rlc(f))
    _, _, err = run(capsys, path)
    assert "hint:" not in err
    # An inductor (low impedance at the low end) gives no false hint either.
    _, _, err = run(capsys, INDUCTOR)
    assert "hint:" not in err
    # The same capacitor never divided by the through: cable loss leaves |S21| ≈ 0.85.
    s = skrf.Network(str(path)).s * 0.85
    raw = write_touchstone_s(tmp_path / "raw.s2p", f, s)
    _, _, err = run(capsys, raw)
    assert re.search(r"hint: \|S21\| reads about 0\.85 of what a shunt-through", err), err
    assert "normalised to the through" in err


def test_series_r_against_the_files_comment_warns(tmp_path, capsys):
    f = np.logspace(2, 8, 121)
    s = np.empty((f.size, 2, 2), dtype=complex)
    z = rlc(f)
    s21 = 2 * z / (2 * z + 50.0)
    s[:, 0, 0] = s[:, 1, 1] = s21 - 1
    s[:, 0, 1] = s[:, 1, 0] = s21
    path = write_touchstone_s(tmp_path / "c.s2p", f, s, comments=["no resistors fitted"])
    _, _, err = run(capsys, path, "--series-r", "499")
    assert "--series-r 499 ohm contradicts the file's comments, which state 0 ohm" in err
    _, _, err = run(capsys, path)
    assert "contradicts" not in err


def test_an_unquoted_unit_is_named_not_read_as_a_file(capsys):
    code, _, err = run(capsys, BULK, "--fmin", "10", "MHz")
    assert code == 2
    assert "'MHz' is not a file: it looks like the unit of an option's value" in err
    assert "--fmin '10 MHz'" in err
