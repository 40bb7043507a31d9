"""The report opens in headless Chromium with every figure loaded and is not blank."""

from __future__ import annotations

import re
import shutil
import subprocess

import pytest
from PIL import Image

CHROMIUM = shutil.which("chromium") or shutil.which("chromium-browser")
FLAGS = ["--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
         "--disable-background-networking", "--disable-component-update", "--disable-sync"]

pytestmark = [
    pytest.mark.slow,  # builds the report on results of the real null and compare stages
    pytest.mark.skipif(CHROMIUM is None,
                       reason="chromium is not installed here (CI installs Debian's chromium package)"),
]

# Appended to a copy of the page: after the load event, count the <img> elements the browser
# decoded (complete with a natural width) and write the counts into the DOM.
PROBE = """
<script>
window.addEventListener("load", function () {
  var imgs = Array.prototype.slice.call(document.images);
  var ok = imgs.filter(function (im) { return im.complete && im.naturalWidth > 0; }).length;
  var out = document.createElement("div");
  out.id = "probe";
  out.textContent = "images=" + imgs.length + " loaded=" + ok;
  document.body.appendChild(out);
});
</script>
"""


def _chromium(args: list[str], tmp_path) -> subprocess.CompletedProcess:
    profile = tmp_path / "profile"
    return subprocess.run([CHROMIUM, *FLAGS, f"--user-data-dir={profile}", *args],
                          capture_output=True, text=True, timeout=120)


def test_screenshot_is_not_blank(built_report, tmp_path):
    paths, _ = built_report
    shot = tmp_path / "shot.png"
    _chromium([f"--screenshot={shot}", "--window-size=1280,2000",
               (paths["out"] / "report.html").resolve().as_uri()], tmp_path)
    assert shot.is_file(), "chromium wrote no screenshot"
    with Image.open(shot) as im:
        assert im.size == (1280, 2000)
        colours = im.convert("RGB").getcolors(maxcolors=1 << 24)
    # A blank page has one colour; the report's header, tables and figures give thousands.
    assert len(colours) > 1000
    # and no single colour (the background) covers almost everything
    assert max(count for count, _ in colours) < 0.9 * 1280 * 2000


def test_every_figure_loads_in_the_browser(built_report, tmp_path):
    paths, result = built_report
    page = (paths["out"] / "report.html").read_text(encoding="utf-8")
    probe = tmp_path / "probe.html"
    probe.write_text(page.replace("</body>", PROBE + "</body>"), encoding="utf-8")
    run = _chromium(["--dump-dom", "--virtual-time-budget=10000", probe.resolve().as_uri()], tmp_path)
    match = re.search(r"images=(\d+) loaded=(\d+)", run.stdout)
    assert match, f"the probe did not run: {run.stderr[-500:]}"
    total, loaded = map(int, match.groups())
    assert total == len(result.figures)
    assert loaded == total
