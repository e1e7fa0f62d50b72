"""The report renders in a real browser: headless Chromium (Debian package ``chromium``)
loads ``report.html`` with no console error, and every embedded figure decodes.

The report itself carries no script; the test renders a copy with a small probe
appended that records, on the page, how many images decoded (``naturalWidth`` > 0).
"""

from __future__ import annotations

import re
import shutil
import subprocess

import pytest

CHROMIUM = shutil.which("chromium") or shutil.which("chromium-browser")

pytestmark = pytest.mark.skipif(
    CHROMIUM is None,
    reason="headless Chromium is not installed (Debian package 'chromium'; .ci/run installs it)",
)

PROBE = """<script>
window.addEventListener("load", () => {
  const images = Array.from(document.images);
  const shown = images.filter((i) => i.complete && i.naturalWidth > 0 && i.naturalHeight > 0);
  const widths = shown.map((i) => i.naturalWidth);
  document.body.setAttribute("data-probe",
    `images=${images.length} shown=${shown.length} minwidth=${Math.min(...widths)}`);
});
</script>"""


def _chromium(*args: str, timeout: float = 120) -> subprocess.CompletedProcess[str]:
    return subprocess.run(
        [
            CHROMIUM,
            "--headless",
            "--no-sandbox",
            "--disable-gpu",
            "--disable-dev-shm-usage",
            "--no-first-run",
            "--enable-logging=stderr",
            "--v=0",
            *args,
        ],
        capture_output=True,
        text=True,
        timeout=timeout,
        check=False,
    )


@pytest.fixture(scope="module")
def rendered(written_report, tmp_path_factory):
    # The report written once for the session (its figures are embedded), copied here.
    folder = tmp_path_factory.mktemp("browser")
    path = folder / "report.html"
    path.write_text(written_report[2], encoding="utf-8")
    probed = folder / "probed.html"
    probed.write_text(written_report[2].replace("</body>", PROBE + "</body>"), encoding="utf-8")
    dom = _chromium("--virtual-time-budget=10000", "--dump-dom", probed.as_uri())
    shot = folder / "report.png"
    screenshot = _chromium(
        "--window-size=1280,2000", f"--screenshot={shot}", "--hide-scrollbars", path.as_uri()
    )
    return path, dom, shot, screenshot


def test_every_figure_decodes_and_shows_in_the_browser(rendered):
    path, dom, _, _ = rendered
    assert dom.returncode == 0, dom.stderr[-2000:]
    match = re.search(r'data-probe="images=(\d+) shown=(\d+) minwidth=(\d+)"', dom.stdout)
    assert match, "the probe did not run: the page did not finish loading"
    images, shown, min_width = (int(g) for g in match.groups())
    expected = path.read_text(encoding="utf-8").count('<img alt="')
    assert images == shown == expected > 0
    assert min_width >= 1600  # figures large enough for slides


def test_the_page_loads_without_console_errors(rendered):
    _, dom, _, screenshot = rendered
    for run in (dom, screenshot):
        # Chromium logs page console messages as "CONSOLE(...)" lines; an uncaught script
        # error or a failed resource shows there.
        errors = [
            line
            for line in run.stderr.splitlines()
            if "CONSOLE" in line or "Uncaught" in line or "Failed to load resource" in line
        ]
        assert errors == []


def test_a_screenshot_of_the_report_is_a_page_with_content(rendered):
    from PIL import Image, ImageStat

    _, _, shot, screenshot = rendered
    assert screenshot.returncode == 0, screenshot.stderr[-2000:]
    with Image.open(shot) as image:
        assert image.size == (1280, 2000)
        # Not a blank page: text, tables and figures vary the pixels.
        assert max(ImageStat.Stat(image.convert("L")).stddev) > 10
