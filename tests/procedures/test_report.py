"""The run report: one self-contained HTML file with every part, embedded PNG figures
(also saved under plots/), escaped text, SPICE text, lot statistics and the bias table."""

from __future__ import annotations

import base64
import html.parser
import io
import re

import pytest
from PIL import Image

from bench import exports, report, report_html, report_sample

PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"  # PNG specification (ISO/IEC 15948), file signature


@pytest.fixture(scope="module")
def written(written_report):
    return written_report


class _TagCounter(html.parser.HTMLParser):
    VOID = frozenset({"meta", "img", "br", "hr", "link", "input"})

    def __init__(self):
        super().__init__()
        self.stack: list[str] = []
        self.errors: list[str] = []

    def handle_starttag(self, tag, attrs):
        if tag not in self.VOID:
            self.stack.append(tag)

    def handle_endtag(self, tag):
        if not self.stack or self.stack[-1] != tag:
            self.errors.append(f"</{tag}> closes {self.stack[-1:] or 'nothing'}")
        else:
            self.stack.pop()


def test_report_is_one_balanced_html_file(written):
    folder, path, text = written
    assert path == folder / "report.html"
    assert text.startswith("<!DOCTYPE html>")
    parser = _TagCounter()
    parser.feed(text)
    assert parser.errors == [] and parser.stack == []
    # Self-contained: no external stylesheet, script or image.
    assert "<script" not in text and "<link" not in text
    assert not re.search(r'src="(?!data:image/png;base64,)', text)


def test_every_part_and_sample_is_reported(summary, written):
    _, _, text = written
    for spec in summary.parts:
        assert f"Part {spec.name}</h2>" in text
    for sample in summary.samples:
        heading = f"{sample.part} / {sample.sample}"
        if sample.bias_v:
            heading += f" at {sample.bias_v:g} V"
        assert f"<h4>{heading}</h4>" in text


def test_embedded_images_decode_as_png_and_match_plots_folder(written):
    folder, _, text = written
    images = re.findall(r'src="data:image/png;base64,([A-Za-z0-9+/=]+)"', text)
    saved = sorted((folder / "plots").glob("*.png"))
    assert len(images) == len(saved) > 0
    saved_bytes = {p.read_bytes() for p in saved}
    for encoded in images:
        data = base64.b64decode(encoded, validate=True)
        assert data.startswith(PNG_SIGNATURE)
        with Image.open(io.BytesIO(data)) as image:
            image.verify()
        assert data in saved_bytes


def test_figures_per_sample_and_per_part(summary, written):
    folder, _, _ = written
    names = {p.stem for p in (folder / "plots").glob("*.png")}
    for sample in summary.samples:
        # One figure per sample: |Z|, ESR and (with a fit) the residuals share its axis.
        assert f"{exports.safe_filename(sample.label)}_impedance" in names
        assert f"{exports.safe_filename(sample.label)}_residuals" not in names
    assert {"ZBEX-C10U_lot", "ZBEX-C10U_bias", "ZBEX-L2U2_lot", "ZBEX-F600_lot"} <= names
    assert "ZBEX-P330U_lot" not in names  # one sample only: nothing to overlay


def test_text_from_the_run_is_escaped(written):
    _, _, text = written
    assert "<X5R>" not in text and "&lt;X5R&gt;" in text
    assert "alert(1)</script>" not in text
    assert "&lt;open circuit&gt;" in text  # the failed fit's message
    assert "outputs test &lt;run&gt; &amp; co" in text
    assert "ZBENCH,SIM-VNA&lt;1&gt;,0001,1.0" in text


def test_setup_calibration_window_and_ground_loop(written):
    _, _, text = written
    for heading in ("Set-up", "Calibration", "Ground-loop check", "Measurable window"):
        assert f"<h2>{heading}</h2>" in text
    assert "100 Hz" in text and "200 MHz" in text  # sweep, SI prefixes
    assert "90 min" in text  # calibration age of 5400 s
    assert "650 µΩ" in text  # ground-loop DC error
    # The inductor's resonance rises above the 50 Ω window: its points outside are listed.
    window = text.split("<h2>Measurable window</h2>", 1)[1].split("</table>", 1)[0]
    row = re.search(r"<tr><td>ZBEX-L2U2_s1</td>(.*?)</tr>", window).group(1)
    assert "MHz" in row and ">0<" not in row


def test_landmarks_verdicts_spice_lot_and_bias(summary, written):
    _, _, text = written
    assert "FAIL" in text and "PASS" in text
    # Under bias: no verdict, the change from the same sample at 0 V instead (as in
    # summary.csv's change_from_0v).
    assert "Not judged under bias" in text and "from the same sample at 0 V" in text
    glance = text.split("<h2>Results at a glance</h2>", 1)[1].split("</table>", 1)[0]
    assert "vs 0 V" in glance and "not judged" in glance
    assert text.count("<h4>SPICE subcircuit</h4>") == sum(
        s.fit is not None for s in summary.samples
    )
    for sample in summary.samples:
        if sample.fit is not None:
            assert f".subckt {exports.sample_spice_name(sample)} 1 2" in text
    assert "<h4>Lot statistics at 0 V</h4>" in text and "<h4>Lot statistics at 3 V</h4>" in text
    assert "<h4>Capacitance versus DC bias</h4>" in text
    assert "ZBEX_C10U_typ" in text
    # Each landmark as the run shows it, where it came from, and the model's own value.
    assert "<th>from</th>" in text and "<th>model vs data</th>" in text
    for key in ("c_low", "esl", "srf", "esr_at_srf", "l_low", "r_dc", "z_at_srf", "c_par"):
        assert f"<td>{key}</td>" in text


def test_value_formatting_by_key_suffix():
    assert report_html.value_text("stop_hz", 200e6) == "200 MHz"
    assert report_html.value_text("series_r_ohm", 499.0) == "499 Ω"
    assert report_html.value_text("calibration_age_s", 90000) == "25.0 h"
    assert report_html.value_text("power_dbm", -10) == "-10 dBm"
    assert report_html.value_text("transformer", True) == "yes"


def test_bias_points_give_the_change_from_zero_volts(summary, written):
    _, _, text = written
    biased = [s for s in summary.samples if s.bias_v and s.fit is not None]
    assert biased
    for sample in biased:
        zero = next(
            s
            for s in summary.samples
            if (s.part, s.sample) == (sample.part, sample.sample) and not s.bias_v
        )
        # Judged on the shown landmark (from the data where it holds), as the summary is.
        spec = summary.part(sample.part)
        change = exports.main_landmark(spec, sample)[1] / exports.main_landmark(spec, zero)[1] - 1

        heading = f"<h4>{sample.part} / {sample.sample} at {sample.bias_v:g} V</h4>"
        section = text.split(heading, 1)[1].split("</section>", 1)[0]
        assert f"{100 * change:+.2f} % from the same sample at 0 V" in section
        assert "PASS" not in section and "FAIL" not in section


def test_fit_quality_counts_points_used_and_why_others_were_not(summary, written):
    _, _, text = written
    for sample in summary.samples:
        if sample.fit is None:
            continue
        total = sample.data.f.size
        outside = int((~sample.data.inside_window).sum())
        line = report_sample.quality_text(sample)
        assert f"{sample.fit.quality.points_used} of {total} points used" in line
        # The error against what the points' uncertainty predicts, beside the RMS error.
        assert f"({sample.fit.quality.noise_ratio:.2g} × the noise)" in line
        assert (f"{outside} outside the measurable window" in line) == (outside > 0)
        assert f"Fit quality: {report.esc(line)}." in text


def test_a_bead_is_reported_on_its_impedance_at_the_stated_frequency(summary, written):
    _, _, text = written
    bead = summary.part("ZBEX-F600")
    label = f"|Z| at {report.format_si(bead.nominal_at_hz, 'Hz', 4)}"
    glance = text.split("<h2>Results at a glance</h2>", 1)[1].split("</table>", 1)[0]
    assert report.esc(label) in glance and "z_at_nominal_hz" not in glance


def test_a_calibration_made_in_the_runs_first_second_is_made_during_the_run(summary):
    """The calibration's time is stored to the second, the run's start to the
    millisecond: a calibration in the same second is not 0 s old at the start."""
    from dataclasses import replace

    calibration = {"method": "through", "time": "2026-01-02T03:04:05+00:00"}
    start = "2026-01-02T03:04:05.678+00:00"
    setup = {**summary.setup, "started": start, "created": start}
    same = replace(summary, calibration=calibration, setup=setup)
    assert report._calibration_facts(same)["age"] == "made during this run"
    earlier = replace(same, calibration={**calibration, "time": "2026-01-02T02:04:05+00:00"})
    assert report._calibration_facts(earlier)["age"].endswith("at the start of the run")
    assert report._calibration_facts(earlier)["age"] != "0 s at the start of the run"


def test_the_reports_text_and_recipes_load_no_plotting_library(tmp_path):
    # The run's own process makes the report's text and hands the figures out as named
    # recipes; only the processes that draw them load matplotlib (in a fresh interpreter:
    # this one has it from other tests).
    import json
    import subprocess
    import sys
    import textwrap
    from pathlib import Path

    here = Path(__file__).resolve().parent
    script = textwrap.dedent(
        f"""
        import json, sys
        from pathlib import Path
        sys.path.insert(0, {str(here)!r})
        import run_summary_data
        from bench.report import _report_text
        text, figs = _report_text(run_summary_data.build(), Path({str(tmp_path)!r}))
        names = sorted({{plot.build for plot in figs.queued}})
        print(json.dumps([names, "matplotlib" in sys.modules]))
        """
    )
    done = subprocess.run(
        [sys.executable, "-c", script], capture_output=True, text=True, timeout=300
    )
    assert done.returncode == 0, done.stderr
    names, loaded = json.loads(done.stdout.strip().splitlines()[-1])
    assert names == ["bias_figure", "lot_figure", "sample_figure"]
    assert loaded is False
    # Each recipe still draws its figure.
    from bench import plots

    assert all(callable(getattr(plots, name)) for name in names)
