"""The report in a real browser: headless Chromium opens it offline, every image loads, no
section is empty, and a screenshot is kept under ``test-artifacts/``.

Chromium is Debian's ``chromium`` package (``apt-get install -y --no-install-recommends
chromium``). The test skips, saying so, only where no Chromium binary can be found.
"""

from __future__ import annotations

import html as html_lib
import re
import shutil
import subprocess
from pathlib import Path

import pytest
from PIL import Image

from lifecycle.report import write_report

from .test_report import SECTIONS, build_case

ARTIFACTS = Path(__file__).resolve().parents[1] / "test-artifacts"
WIDTH = 1280
MAX_HEIGHT = 30_000

# Appended to a copy of the page (the report itself carries no script): once the page has
# loaded, count the images that decoded (naturalWidth > 0) and the sections with no content
# beyond their heading, and write the counts onto <body> for --dump-dom to show.
PROBE = """
<script>
window.addEventListener("load", function () {
  var images = Array.prototype.slice.call(document.images);
  var loaded = images.filter(function (i) { return i.complete && i.naturalWidth > 0; });
  var sections = Array.prototype.slice.call(document.querySelectorAll("section"));
  var empty = sections.filter(function (s) {
    var title = s.querySelector("h2");
    var rest = s.innerText.length - (title ? title.innerText.length : 0);
    return s.children.length < 2 || rest < 20;
  });
  var body = document.body;
  body.setAttribute("data-images", String(images.length));
  body.setAttribute("data-loaded", String(loaded.length));
  body.setAttribute("data-sections", sections.map(function (s) { return s.id; }).join(","));
  body.setAttribute("data-empty", empty.map(function (s) { return s.id; }).join(","));
  body.setAttribute("data-height", String(document.documentElement.scrollHeight));
});
</script>
"""


@pytest.fixture(scope="session")
def report_case(tmp_path_factory):
    return build_case(tmp_path_factory)  # built once, shared with test_report.py


def _chromium() -> str:
    for candidate in (
        "/usr/bin/chromium",
        shutil.which("chromium"),
        shutil.which("chromium-browser"),
    ):
        if candidate and Path(candidate).is_file():
            return candidate
    pytest.skip(
        "Chromium was not found (/usr/bin/chromium or chromium on PATH); install Debian's "
        "package with: apt-get install -y --no-install-recommends chromium"
    )


def _run(binary: str, profile: Path, *args: str) -> subprocess.CompletedProcess:
    command = [
        binary,
        "--headless",
        "--no-sandbox",
        "--disable-gpu",
        "--disable-background-networking",
        "--disable-component-update",
        "--disable-sync",
        "--no-first-run",
        f"--user-data-dir={profile}",
        # offline: every host name fails to resolve and no proxy is reachable
        "--host-resolver-rules=MAP * ~NOTFOUND",
        "--proxy-server=127.0.0.1:9",
        "--hide-scrollbars",
        *args,
    ]
    return subprocess.run(command, capture_output=True, text=True, timeout=180, check=False)


def test_report_opens_in_headless_chromium(report_case, tmp_path):
    binary = _chromium()
    folder = tmp_path / "2026-10"
    paths = write_report(report_case.inputs, folder)
    page = paths["html"].read_text(encoding="utf-8")
    assert page.count("</body>") == 1
    probe = tmp_path / "probe.html"
    probe.write_text(page.replace("</body>", PROBE + "</body>"), encoding="utf-8")

    done = _run(
        binary, tmp_path / "profile", "--virtual-time-budget=20000", "--dump-dom", probe.as_uri()
    )
    assert done.returncode == 0, done.stderr[-2000:]
    body = re.search(r"<body([^>]*)>", done.stdout)
    assert body, done.stdout[:500]
    found = dict(re.findall(r'data-([a-z]+)="([^"]*)"', html_lib.unescape(body.group(1))))
    assert int(found["images"]) == page.count("<img ") >= 12
    assert found["loaded"] == found["images"], found
    assert found["sections"].split(",") == SECTIONS
    assert found["empty"] == "", found

    ARTIFACTS.mkdir(exist_ok=True)
    shot = ARTIFACTS / "report_2026-10.png"
    height = min(max(int(found["height"]), 800), MAX_HEIGHT)
    done = _run(
        binary,
        tmp_path / "profile",
        f"--window-size={WIDTH},{height}",
        f"--screenshot={shot}",
        paths["html"].as_uri(),
    )
    assert done.returncode == 0, done.stderr[-2000:]
    with Image.open(shot) as image:
        assert image.format == "PNG"
        assert image.size == (WIDTH, height)
        # not a blank page: the screenshot holds more than a handful of colours
        assert len(image.convert("RGB").getcolors(maxcolors=1 << 20) or []) > 50
