"""The HTML report in a real browser: every image loads, every pass shows, no script runs.

Uses headless Chromium (Debian's ``chromium`` package; .ci/run installs it).  Skipped,
with the reason, where no Chromium is installed.
"""

from __future__ import annotations

import json
import re
import shutil
import subprocess

import pytest

from printcheck.cli import main

CHROMIUM = shutil.which("chromium") or shutil.which("chromium-browser")
pytestmark = [
    pytest.mark.browser,
    pytest.mark.skipif(
        CHROMIUM is None, reason="headless Chromium is not installed (apt-get install chromium)"
    ),
]

# A file name cannot hold "/", so the classic "<script>...</script>" cannot be a name on
# disk; an image with an onerror handler is the same attack without one.
HOSTILE = "<img src=x onerror=alert(1)><script>alert(2)<\\script>.jpg"

# Runs before anything else in the page: records any alert() and, once loaded, writes
# what the page shows into a <pre id="probe"> that --dump-dom prints.
PROBE = """<script>
window.__alerted = false;
window.alert = function () { window.__alerted = true; };
window.addEventListener('load', function () {
  var imgs = Array.prototype.slice.call(document.images);
  var broken = imgs.filter(function (i) { return !(i.complete && i.naturalWidth > 0); });
  var p = document.createElement('pre');
  p.id = 'probe';
  p.textContent = JSON.stringify({
    images: imgs.length, broken: broken.length, scripts: document.scripts.length,
    alerted: window.__alerted, external: imgs.filter(function (i) {
      return i.src.indexOf('data:') !== 0; }).length,
    text: document.body.innerText});
  document.body.appendChild(p);
});
</script>"""


def _chromium(*args: str) -> subprocess.CompletedProcess[str]:
    assert CHROMIUM is not None
    flags = [
        "--headless",
        "--no-sandbox",
        "--disable-gpu",
        "--disable-quic",
        "--no-first-run",
        "--disable-background-networking",
        "--disable-component-update",
        "--disable-sync",
        "--hide-scrollbars",
        "--virtual-time-budget=10000",
    ]
    return subprocess.run(
        [CHROMIUM, *flags, *args], capture_output=True, text=True, timeout=120, check=False
    )


@pytest.fixture(scope="module")
def report(small_job, tmp_path_factory):  # type: ignore[no-untyped-def]
    folder, photos = small_job
    job = tmp_path_factory.mktemp("hostile-job")
    names = []
    for i, p in enumerate(photos):
        name = HOSTILE if i == 0 else p.file
        shutil.copy2(folder / p.file, job / name)
        names.append(name)
    shutil.copy2(folder / "layout.toml", job / "layout.toml")
    out = job / "out"
    code = main(
        [
            "batch",
            str(job),
            "--layout",
            str(job / "layout.toml"),
            "--surface",
            "<b>way</b>",
            "--spec",
            "slideway-high-precision",
            "--out",
            str(out),
            "--db",
            str(job / "h.sqlite"),
        ]
    )
    # the last pass's true density (13.75 points per square inch) is far below the
    # spec's 20 per 25 mm square (20.6 per square inch): the batch says "does not meet"
    assert photos[-1].density * 1.15 < 20 * 645.16 / 625
    assert code == 1
    return out / "report.html", names


def test_report_loads_every_image_and_runs_no_script(report, tmp_path) -> None:  # type: ignore[no-untyped-def]
    path, names = report
    html = path.read_text(encoding="utf-8")
    probe = tmp_path / "probe.html"
    probe.write_text(
        re.sub(r"<head([^>]*)>", lambda m: m.group(0) + PROBE, html, count=1), encoding="utf-8"
    )
    result = _chromium("--user-data-dir=" + str(tmp_path / "profile"), "--dump-dom", probe.as_uri())
    found = re.search(r'<pre id="probe">(.*?)</pre>', result.stdout, re.S)
    assert found, result.stderr[-2000:]
    import html as html_mod

    data = json.loads(html_mod.unescape(found.group(1)))
    assert data["images"] >= len(names) and data["broken"] == 0  # every image decodes
    assert data["external"] == 0  # self-contained: images are data: URIs
    assert (
        data["scripts"] == 1 and data["alerted"] is False
    )  # only our probe; the file name ran nothing
    assert data["images"] == html.count("<img ")  # the hostile name added no element
    for name in names:  # every pass is shown, the hostile name as plain text
        assert name in data["text"]
    assert "<b>way</b>" in data["text"]


def test_report_screenshot(report, tmp_path) -> None:  # type: ignore[no-untyped-def]
    path, _ = report
    shot = tmp_path / "report.png"
    result = _chromium(
        "--user-data-dir=" + str(tmp_path / "profile"),
        f"--screenshot={shot}",
        "--window-size=1280,2400",
        path.as_uri(),
    )
    assert shot.is_file() and shot.stat().st_size > 10_000, result.stderr[-2000:]
    import cv2

    image = cv2.imread(str(shot))
    assert image is not None and image.shape[1] == 1280
    assert image.std() > 10  # a page with content, not a blank sheet
