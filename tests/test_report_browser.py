"""report.html in a real browser: headless Chromium loads it without console errors, every image loads,
the folder works when moved (only relative links and embedded images), and the first screen renders.

Chromium comes from the Debian package `chromium` (`.ci/run` installs it when missing); without it these
tests are skipped, saying so.
"""

from __future__ import annotations

import json
import re
import shutil
import subprocess
import zipfile
from html.parser import HTMLParser
from pathlib import Path

import numpy as np
import pytest

from fieldsection.cli import main
from test_bad_input import PLATES_CASE, write_case

BROWSERS = ("chromium", "chromium-browser", "google-chrome", "google-chrome-stable")
BROWSER = next((shutil.which(name) for name in BROWSERS if shutil.which(name)), None)
pytestmark = pytest.mark.skipif(BROWSER is None, reason="no headless Chromium found (install the Debian package "
                                                        "'chromium': apt-get install -y chromium); browser tests skipped")

CASE = PLATES_CASE + """
[refinement]
adaptive = false

[probes.across_gap]
from = ["5 mm", "-0.2 mm"]
to = ["5 mm", "1.2 mm"]
"""

#: injected into a test copy of the page only (never into the shipped report): records script errors, failed
#: resource loads and console.error calls, then each image's state once the page has loaded
CHECKER = """<script>
window.__problems = [];
window.addEventListener("error", function (e) {
  var t = e.target;
  window.__problems.push(t && t !== window ? "failed to load " + (t.currentSrc || t.src || t.href || t.tagName).slice(0, 80)
                                          : "script error: " + e.message);
}, true);
var __consoleError = console.error;
console.error = function () { window.__problems.push("console.error: " + Array.from(arguments).join(" ")); __consoleError.apply(console, arguments); };
window.addEventListener("load", function () {
  var images = Array.from(document.images);
  var out = document.createElement("pre");
  out.id = "browser-check";
  out.textContent = JSON.stringify({
    images: images.length,
    broken: images.filter(function (i) { return !(i.complete && i.naturalWidth > 0); }).map(function (i) { return i.alt; }),
    problems: window.__problems,
  });
  document.body.appendChild(out);
});
</script>"""


def _chromium(*args: str, profile: Path) -> subprocess.CompletedProcess:
    command = [BROWSER, "--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
               "--disable-background-networking", "--disable-component-update", "--disable-sync",
               "--disable-dev-shm-usage", f"--user-data-dir={profile}", "--enable-logging=stderr", "--v=0", *args]
    return subprocess.run(command, capture_output=True, text=True, timeout=120)


@pytest.fixture(scope="module")
def moved_report(tmp_path_factory):
    """The plates case with a probe line and every figure, zipped, and unzipped somewhere else."""
    folder = tmp_path_factory.mktemp("browser")
    reports = folder / "reports"
    assert main(["run", str(write_case(folder, CASE)), "--reports", str(reports), "--quiet"]) == 0
    archive = folder / "plates.zip"
    with zipfile.ZipFile(archive, "w") as zipped:
        for path in (reports / "plates").iterdir():
            zipped.write(path, f"plates/{path.name}")
    shutil.rmtree(reports)  # the original is gone: the copy must stand on its own
    moved = folder / "elsewhere"
    with zipfile.ZipFile(archive) as zipped:
        zipped.extractall(moved)
    return moved / "plates"


class _Links(HTMLParser):
    def __init__(self):
        super().__init__()
        self.links: list[str] = []

    def handle_starttag(self, tag, attrs):
        self.links += [value for name, value in attrs if name in ("src", "href") and value]


def test_links_are_relative_or_embedded(moved_report):
    parser = _Links()
    parser.feed((moved_report / "report.html").read_text(encoding="utf-8"))
    assert any(link.startswith("data:image/png;base64,") for link in parser.links)
    for link in parser.links:
        if link.startswith("data:"):
            continue
        assert not re.match(r"^([a-z]+:|/|\\\\)", link, re.I), f"absolute link {link!r}"
        assert (moved_report / link).is_file(), f"link {link!r} does not resolve inside the report folder"


def test_page_loads_without_errors_and_every_image_shows(moved_report, tmp_path):
    page = moved_report / "report.html"
    html = page.read_text(encoding="utf-8")
    checked = moved_report / "report_checked.html"  # a test copy beside the original, so relative links hold
    checked.write_text(html.replace("</head>", CHECKER + "</head>", 1), encoding="utf-8")
    run = _chromium("--virtual-time-budget=10000", "--dump-dom", checked.as_uri(), profile=tmp_path / "profile")
    assert run.returncode == 0, run.stderr[-2000:]
    found = re.search(r'<pre id="browser-check">(.*?)</pre>', run.stdout, re.S)
    assert found, "the page's load event never ran: " + run.stderr[-2000:]
    report = json.loads(found.group(1).replace("&quot;", '"').replace("&amp;", "&").replace("&lt;", "<")
                        .replace("&gt;", ">"))
    expected = html.count("<img ")
    assert expected >= 7  # regions, potential, field, field detail, bound charge, superposition, probe line
    assert report["images"] == expected
    assert report["broken"] == [], report
    assert report["problems"] == [], report
    console = [line for line in run.stderr.splitlines() if ":CONSOLE" in line]  # any message the page logged
    assert console == [], console


def test_first_screen_renders(moved_report, tmp_path):
    from matplotlib.image import imread

    shot = tmp_path / "first_screen.png"
    run = _chromium(f"--screenshot={shot}", "--window-size=1280,1000", "--hide-scrollbars",
                    (moved_report / "report.html").as_uri(), profile=tmp_path / "profile")
    assert run.returncode == 0 and shot.is_file(), run.stderr[-2000:]
    pixels = imread(shot)[..., :3]
    assert pixels.shape[:2] == (1000, 1280)
    # not blank: dark text on a light page, and the verdict's coloured boxes
    assert (pixels.mean(axis=2) < 0.3).mean() > 0.005
    assert np.unique((pixels.reshape(-1, 3) * 255).astype(np.uint8), axis=0).shape[0] > 50
    html = (moved_report / "report.html").read_text(encoding="utf-8")
    verdict, caution, details = html.index('id="verdict"'), html.index("not a certification"), html.index("<h2>Inputs")
    assert caution < details and verdict < details  # the verdict and the caution come before any detail
