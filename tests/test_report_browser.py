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


def test_report_at_phone_width_leads_with_the_latest_pass(report, tmp_path) -> None:  # type: ignore[no-untyped-def]
    """At 390 px (a phone held upright) nothing scrolls sideways, the earlier passes are
    folded away in closed <details>, and the overlay opens at its natural size."""
    sync_api = pytest.importorskip("playwright.sync_api", reason="playwright is not installed")
    path, names = report
    with sync_api.sync_playwright() as pw:
        browser = pw.chromium.launch(executable_path=CHROMIUM, args=["--no-sandbox"])
        try:
            page = browser.new_page(viewport={"width": 390, "height": 844}, device_scale_factor=2)
            page.goto(path.as_uri())
            assert page.evaluate("document.documentElement.scrollWidth") <= 390
            # the latest pass is open on the page; the earlier ones fold away, closed
            latest = page.locator("section.pass#pass-3")
            assert latest.count() == 1 and latest.locator("table.checks").count() == 1
            assert latest.locator("ol.advice li").count() >= 1  # where to scrape next
            folded = page.evaluate(
                "Array.from(document.querySelectorAll('details.pass')).map(d => [d.id, d.open])"
            )
            assert folded == [["pass-2", False], ["pass-1", False]]
            # the surface, its trend and the latest pass come before the earlier passes
            order = page.evaluate(
                "['header.surface', 'img.trend', '#pass-3', 'details.pass']"
                ".map(s => document.querySelector(s).getBoundingClientRect().top)"
            )
            assert order == sorted(order)
            page.screenshot(path=str(tmp_path / "report-390px.png"), full_page=True)
            # the overlay at its natural size, in a frame of its own: the page stays put
            latest.locator("details.zoom > summary").click()
            natural, shown = page.evaluate(
                "(() => { const i = document.querySelector('#pass-3 img.overlay');"
                " return [i.naturalWidth, i.clientWidth]; })()"
            )
            assert natural > 390 and shown == pytest.approx(natural, abs=1)
            assert page.evaluate("document.documentElement.scrollWidth") <= 390
            # every earlier pass opened: its checks, guidance and cell maps still fit
            for summary in page.locator("details.pass > summary").all():
                summary.click()
            assert page.evaluate(
                "Array.from(document.querySelectorAll('details.pass')).every(d => d.open)"
            )
            assert page.locator("table.heat:not(.change)").count() == 2 * len(names)
            assert page.locator("table.heat.change").count() == len(names) - 1
            assert page.evaluate("document.documentElement.scrollWidth") <= 390
            widths = page.evaluate(
                "Array.from(document.querySelectorAll('table.checks, ol.advice, table.heat,"
                " img.trend')).map(e => e.getBoundingClientRect().right)"
            )
            assert widths and max(widths) <= 390
            page.screenshot(path=str(tmp_path / "report-390px-open.png"), full_page=True)
            print(f"screenshots: {tmp_path}")
        finally:
            browser.close()
