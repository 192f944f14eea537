"""The job sheet (issue 17, item 5): ``printcheck sheet SURFACE`` from the history alone.

Two rendered jobs (``printcheck.synth``, exact truth) are batched into a history through
the command line: six passes of one photo each on machine ``lathe-1``, and six passes of
two stations each.  The sheet is checked against what the history itself says
(``printcheck progress --json``) and against the spec's own words
(``printcheck.wording.target_lines``); its PDF, printed by headless Chromium, against
the paper sizes of ISO 216 (A4, 210 x 297 mm) and ANSI/ASME Y14.1 (Letter, 8.5 x 11 in),
with the pages counted and their text read by pypdf (a reference PDF reader): one or two
pages, and no heading the lowest text on a page (the last thing before a page break).
Where no Chromium is installed the PDF tests are skipped with the reason.
"""

from __future__ import annotations

import json
import shutil
import unicodedata
from dataclasses import dataclass, field
from datetime import datetime
from html.parser import HTMLParser
from pathlib import Path
from typing import Any

import pytest

from printcheck.cli import main

SPEC = "slideway-precision"
PLAIN = "lathe-1/front-way"
STATIONED = "bed-way"
STATIONS = ("headstock", "tailstock")
MM_PER_PT = 25.4 / 72.0
# ISO 216 A4 and ANSI Letter, in PDF points (1/72 in)
PAPER_PT = {"a4": (210.0 / MM_PER_PT, 297.0 / MM_PER_PT), "letter": (612.0, 792.0)}


def _run(capsys: pytest.CaptureFixture[str], *args: Any) -> tuple[int, str, str]:
    code = main([str(a) for a in args])
    out, err = capsys.readouterr()
    return code, out, err


def _chromium() -> str | None:
    from printcheck.report.sheet import find_chromium

    try:
        return find_chromium()
    except Exception:  # a PRINTCHECK_CHROMIUM naming nothing: no browser for these tests
        return None


needs_chromium = pytest.mark.skipif(
    _chromium() is None,
    reason="no Chromium to print the PDF with (apt-get install chromium, or PRINTCHECK_CHROMIUM)",
)


# --------------------------------------------------------------------------- the jobs


@dataclass
class History:
    db: Path
    out: Path
    surface: str


@pytest.fixture(scope="module")
def histories(tmp_path_factory: pytest.TempPathFactory) -> dict[str, History]:
    """Both jobs batched into one history, their overlays in one output folder each."""
    from printcheck.synth.job import simulate_job, write_job

    root = tmp_path_factory.mktemp("sheet-jobs")
    db = root / "history.sqlite"
    plain = root / "front-way"
    write_job(plain, seed=5, passes=6, image_size=(1600, 1200), surface_name="front-way")
    code = main(
        [
            "batch", str(plain), "--layout", str(plain / "layout.toml"), "--spec", SPEC,
            "--surface", "front-way", "--machine", "lathe-1", "--out", str(root / "out-plain"),
            "--db", str(db), "--jobs", "2",
        ]
    )  # fmt: skip
    assert code in (0, 1)
    job = root / STATIONED
    for j, (name, seed) in enumerate(zip(STATIONS, (21, 23), strict=True)):
        rendered = root / f"render-{name}"
        photos = write_job(
            rendered,
            seed=seed,
            job=simulate_job(seed=seed, passes=6, form_um=2.0 + 3.0 * j),
            image_size=(1600, 1200),
            start=datetime(2027, 2, 1, 8, 2 * j),
            surface_name=name,
        )
        for p in photos:
            (job / f"pass{p.index}").mkdir(parents=True, exist_ok=True)
            shutil.copy2(rendered / p.file, job / f"pass{p.index}" / f"station-{name}.jpg")
        shutil.copy2(rendered / "layout.toml", root / "layout.toml")
    code = main(
        [
            "batch", str(job), "--layout", str(root / "layout.toml"), "--spec", SPEC,
            "--out", str(root / "out-stations"), "--db", str(db), "--jobs", "2",
        ]
    )  # fmt: skip
    assert code in (0, 1)
    return {
        "plain": History(db, root / "out-plain", PLAIN),
        "stations": History(db, root / "out-stations", STATIONED),
    }


def _progress(capsys: pytest.CaptureFixture[str], h: History) -> dict[str, Any]:
    code, out, err = _run(capsys, "progress", h.surface, "--json", "--db", h.db)
    assert code in (0, 1), err
    data: dict[str, Any] = json.loads(out)
    return data


# --------------------------------------------------------------------------- HTML reading


@dataclass
class Page:
    """What a sheet's HTML holds: elements with data-* fields, headings, rows, images."""

    fields: dict[str, str] = field(default_factory=dict)
    headings: list[tuple[str, str]] = field(default_factory=list)
    rows: list[dict[str, Any]] = field(default_factory=list)
    images: list[str] = field(default_factory=list)
    links: list[str] = field(default_factory=list)
    scripts: int = 0
    text: str = ""


class _Reader(HTMLParser):
    def __init__(self) -> None:
        super().__init__()
        self.page = Page()
        self._stack: list[tuple[str, dict[str, str], list[str]]] = []
        self._row: dict[str, Any] | None = None
        self._texts: list[str] = []

    def handle_starttag(self, tag: str, attrs: list[tuple[str, str | None]]) -> None:
        a = {k: v or "" for k, v in attrs}
        if tag == "script":
            self.page.scripts += 1
        if tag == "img":
            self.page.images.append(a.get("src", ""))
        if tag in ("a", "link"):
            self.page.links.append(a.get("href", ""))
        if tag == "tr" and "data-pass" in a:
            self._row = {"attrs": a, "cells": []}
        if tag in ("img", "meta", "br", "col", "link"):
            return
        self._stack.append((tag, a, []))

    def handle_endtag(self, tag: str) -> None:
        while self._stack:
            t, a, texts = self._stack.pop()
            text = " ".join(" ".join(texts).split())
            if self._stack:
                self._stack[-1][2].append(text)
            if t in ("h1", "h2", "h3"):
                self.page.headings.append((t, text))
            if "data-field" in a:
                self.page.fields[a["data-field"]] = text
            if t == "td" and self._row is not None:
                self._row["cells"].append(text)
            if t == "tr" and self._row is not None:
                self.page.rows.append(self._row)
                self._row = None
            if t == tag:
                break

    def handle_data(self, data: str) -> None:
        self._texts.append(data)
        if self._stack:
            self._stack[-1][2].append(data)


def _read(path: Path) -> Page:
    reader = _Reader()
    reader.feed(path.read_text(encoding="utf-8"))
    reader.close()
    reader.page.text = " ".join(" ".join(reader._texts).split())
    return reader.page


def _sheet(capsys: pytest.CaptureFixture[str], h: History, *extra: Any) -> tuple[Page, Path, str]:
    code, out, err = _run(capsys, "sheet", h.surface, "--db", h.db, "--out", h.out, *extra)
    assert code == 0, err
    assert err == ""
    html_path = next(Path(line.split(": ", 1)[1]) for line in out.splitlines() if "sheet:" in line)
    return _read(html_path), html_path, out


# --------------------------------------------------------------------------- the sheet


def test_sheet_names_surface_machine_spec_sources_and_dates(
    histories: dict[str, History], capsys: pytest.CaptureFixture[str]
) -> None:
    from printcheck.spec import find_spec
    from printcheck.wording import target_lines

    h = histories["plain"]
    page, path, _ = _sheet(capsys, h, "--no-pdf")
    assert path.name == "sheet-lathe-1_front-way.html"  # the machine's "/" is no folder
    assert page.fields["machine"] == "lathe-1" and page.fields["surface"] == "front-way"
    assert page.headings[0] == ("h1", "Job sheet: front-way")
    assert page.fields["spec"] == SPEC
    # the spec's title, and every target with the source the spec itself gives for it
    spec = find_spec(SPEC)
    assert spec.title in page.text
    lines = target_lines(spec)
    assert lines and all(t.source for t in lines)
    rows = page.text
    for t in lines:
        assert f"{t.label} {t.words} {t.source}" in rows, t
    # first and last pass: the dates the history gives (the renderer's EXIF times)
    passes = _progress(capsys, h)["passes"]
    assert page.fields["first"] == passes[0]["taken"][:10]
    assert page.fields["last"] == passes[-1]["taken"][:10]
    verdict = {True: "meets", False: "does not meet"}[passes[-1]["meets"]]
    assert page.fields["verdict"].startswith(f"pass 6 {verdict} {SPEC}")
    # the sign-off: who scraped, who checked, each with a date, blank lines to sign on
    assert "Scraped by Date" in page.text and "Checked by Date" in page.text
    signoff = path.read_text(encoding="utf-8").split('id="signoff"')[1]
    assert signoff.count('<td class="line"></td>') == 2
    assert signoff.count('<td class="date"></td>') == 2


@pytest.mark.parametrize("job", ["plain", "stations"])
def test_one_verdict_line_per_pass_and_station_as_the_history_has_them(
    job: str, histories: dict[str, History], capsys: pytest.CaptureFixture[str]
) -> None:
    h = histories[job]
    page, _, _ = _sheet(capsys, h, "--no-pdf")
    progress = _progress(capsys, h)
    words = {True: "meets", False: "does not meet", None: "not judged"}
    expected: list[tuple[str, str | None, str, str, str]] = []
    for p in progress["passes"]:
        expected.append(
            (str(p["pass"]), None, words[p["meets"]], f"{p['density']:.1f}",
             f"{p['bearing_percent']:.1f} %")
        )  # fmt: skip
        for s in p.get("stations", []):
            expected.append(
                (str(p["pass"]), s["station"], words[s["meets"]], f"{s['density']:.1f}",
                 f"{s['bearing_percent']:.1f} %")
            )  # fmt: skip
    got = [
        (
            r["attrs"]["data-pass"],
            r["attrs"].get("data-station"),
            r["attrs"]["data-verdict"],
            r["cells"][3],
            r["cells"][4],
        )
        for r in page.rows
        if "data-verdict" in r["attrs"]
    ]
    assert got == expected
    assert len(progress["passes"]) == 6
    if job == "stations":
        assert len(got) == 6 * (1 + len(STATIONS))
        # the worst station is the one the history names
        for p in progress["passes"]:
            row = next(
                r
                for r in page.rows
                if r["attrs"]["data-pass"] == str(p["pass"])
                and r["attrs"].get("data-station") == p["worst_station"]
            )
            assert "(worst)" in row["cells"][2]
    else:
        assert len(got) == 6


def test_latest_print_overlay_cells_and_trend_are_inlined(
    histories: dict[str, History], capsys: pytest.CaptureFixture[str]
) -> None:
    h = histories["stations"]
    page, path, _ = _sheet(capsys, h, "--no-pdf")
    # self-contained: every image a data: URI, no script, no link out
    assert page.images and all(src.startswith("data:image/") for src in page.images)
    assert page.scripts == 0 and page.links == []
    # the trend plot and one overlay per station of the latest pass
    text = path.read_text(encoding="utf-8")
    latest = text.split('id="latest"')[1].split("</section>")[0]
    assert latest.count('class="overlay"') == len(STATIONS)
    assert text.count('class="trend"') == 1
    # the cell maps: each of the latest pass's cells with the density the history holds
    from printcheck.history import open_history

    with open_history(h.db, readonly=True) as history:
        stored = [p for p in history.passes(h.surface) if p.number == 6]
    assert len(stored) == len(STATIONS)
    for p in stored:
        for c in p.summary.cells:
            assert f">{c.density:.1f}<small>{c.bearing_percent:.0f}%</small>" in latest


def test_sheet_without_overlays_says_so_and_keeps_the_cells(
    histories: dict[str, History], capsys: pytest.CaptureFixture[str], tmp_path: Path
) -> None:
    h = histories["plain"]
    bare = History(h.db, tmp_path / "elsewhere", h.surface)
    page, path, _ = _sheet(capsys, bare, "--no-pdf")
    assert "No overlay of this photo in the output folder" in page.text
    assert 'class="cells"' in path.read_text(encoding="utf-8")
    assert len(page.images) == 1  # the trend only


def test_names_from_outside_are_escaped(tmp_path: Path) -> None:
    from _hand_results import make_summary

    from printcheck.judge import Verdict
    from printcheck.progress import history_progress
    from printcheck.records import CellSummary, StoredPass
    from printcheck.report.sheet import render_sheet, sheet_name
    from printcheck.spec import find_spec

    hostile = "<img src=x onerror=alert(1)>"
    cells = (CellSummary(0, 0, True, 20, 20.0, 30.0, 1.0),)
    verdict = Verdict(SPEC, False, ())
    summaries = [
        make_summary(n, 10.0 + n, photo=f"{hostile}{n}.jpg", cells=cells, verdict=verdict)
        for n in (1, 2)
    ]
    stored = [
        StoredPass(n, s, SPEC, None, "2027-01-01", note=hostile)
        for n, s in ((1, summaries[0]), (2, summaries[1]))
    ]
    spec = find_spec(SPEC)
    progress = history_progress(hostile, stored, spec=spec)
    text = render_sheet(surface=hostile, spec=spec, stored=stored, progress=progress, out=tmp_path)
    assert hostile not in text
    assert "&lt;img src=x onerror=alert(1)&gt;" in text
    assert "<script" not in text
    assert sheet_name("../../x", ".html") == "sheet-.._.._x.html"


def test_a_surface_without_a_spec_gets_figures_and_no_verdicts(tmp_path: Path) -> None:
    from _hand_results import make_summary

    from printcheck.progress import history_progress
    from printcheck.records import StoredPass
    from printcheck.report.sheet import render_sheet

    stored = [StoredPass(n, make_summary(n, 5.0 * n), None, None, "2027-01-01") for n in (1, 2, 3)]
    progress = history_progress("gib", stored, spec=None)
    text = render_sheet(surface="gib", spec=None, stored=stored, progress=progress, out=tmp_path)
    page = _Reader()
    page.feed(text)
    rows = [r for r in page.page.rows if "data-verdict" in r["attrs"]]
    assert [r["attrs"]["data-verdict"] for r in rows] == ["not judged"] * 3
    assert [r["cells"][3] for r in rows] == ["5.0", "10.0", "15.0"]
    assert "No spec was recorded for this surface" in text
    assert page.page.fields["verdict"] == "pass 3 not judged"


# --------------------------------------------------------------------------- the PDF


@dataclass
class PdfPage:
    width: float
    height: float
    lines: list[tuple[float, str]]  # (y from the page's foot, in points; text), top first


def _pdf_pages(path: Path) -> list[PdfPage]:
    """Each page's size and its text lines, grouped by their baseline (pypdf)."""
    from pypdf import PdfReader

    pages = []
    for page in PdfReader(path).pages:
        by_y: dict[float, list[tuple[float, str]]] = {}
        for y, x, text in _pieces(page):
            by_y.setdefault(y, []).append((x, text))
        lines = [
            (y, _norm(" ".join(t for _, t in sorted(by_y[y])))) for y in sorted(by_y, reverse=True)
        ]
        box = page.mediabox
        pages.append(PdfPage(float(box.width), float(box.height), lines))
    return pages


def _pieces(page: Any) -> list[tuple[float, float, str]]:
    """The text pieces of a pypdf page: (baseline y, x, text), in user space (points); the
    position is the text matrix times the current matrix (ISO 32000-1, 9.4.4, from memory)."""
    pieces: list[tuple[float, float, str]] = []

    def visit(text: str, cm: Any, tm: Any, font: Any, size: Any) -> None:
        if text.strip():
            x = tm[4] * cm[0] + tm[5] * cm[2] + cm[4]
            y = tm[4] * cm[1] + tm[5] * cm[3] + cm[5]
            pieces.append((round(y, 0), x, text.strip()))

    page.extract_text(visitor_text=visit)
    return pieces


def _norm(text: str) -> str:
    return " ".join(unicodedata.normalize("NFKC", text).split())


@needs_chromium
@pytest.mark.browser
@pytest.mark.parametrize("paper", ["a4", "letter"])
@pytest.mark.parametrize("job", ["plain", "stations"])
def test_pdf_of_a_six_pass_job_is_one_or_two_pages_and_strands_no_heading(
    job: str,
    paper: str,
    histories: dict[str, History],
    capsys: pytest.CaptureFixture[str],
    tmp_path: Path,
) -> None:
    h = histories[job]
    out = tmp_path / "out"
    shutil.copytree(h.out, out)  # the overlays the batch left, in a folder of this test's own
    page, _, said = _sheet(capsys, History(h.db, out, h.surface), "--paper", paper)
    pdf = next(Path(line.split(": ", 1)[1].strip()) for line in said.splitlines() if "pdf:" in line)
    pages = _pdf_pages(pdf)
    assert 1 <= len(pages) <= 2, f"{len(pages)} pages"
    width, height = PAPER_PT[paper]
    for p in pages:
        assert p.width == pytest.approx(width, abs=1.0)
        assert p.height == pytest.approx(height, abs=1.0)
    # every section's heading is printed, and none is the lowest text of its page: the
    # page's own footer ("page 1 of 2", in the bottom margin) aside
    headings = {_norm(text) for _, text in page.headings}
    footer_pt = 12.0 / MM_PER_PT
    printed = set()
    for number, p in enumerate(pages, start=1):
        body = [(y, t) for y, t in p.lines if y > footer_pt]
        assert any(t == f"page {number} of {len(pages)}" for y, t in p.lines if y <= footer_pt)
        printed |= {t for _, t in body}
        lowest = min(body)[1]
        assert lowest not in headings, f"page {number} ends with the heading {lowest!r}"
    for h2 in ("Spec", "Passes", "Trend", "Latest print: pass 6", "Sign-off"):
        assert h2 in printed


# --------------------------------------------------------------------------- no browser, bad input


def test_without_chromium_the_html_is_written_and_one_line_says_why(
    histories: dict[str, History],
    capsys: pytest.CaptureFixture[str],
    tmp_path: Path,
    monkeypatch: pytest.MonkeyPatch,
) -> None:
    h = histories["plain"]
    monkeypatch.setenv("PATH", str(tmp_path))  # no chromium on it
    monkeypatch.delenv("PRINTCHECK_CHROMIUM", raising=False)
    out = tmp_path / "out"
    code, said, err = _run(capsys, "sheet", h.surface, "--db", h.db, "--out", out)
    assert code == 0 and err == ""
    assert (out / "sheet-lathe-1_front-way.html").is_file()
    assert not list(out.glob("*.pdf"))
    lines = said.splitlines()
    assert len(lines) == 2 and "needs a Chromium" in lines[1]
    # --no-pdf: nothing to say about a PDF
    code, said, err = _run(capsys, "sheet", h.surface, "--db", h.db, "--out", out, "--no-pdf")
    assert code == 0 and said.splitlines() == [f"sheet: {out / 'sheet-lathe-1_front-way.html'}"]


def test_a_chromium_that_fails_is_one_line_and_the_html_stays(
    histories: dict[str, History], capsys: pytest.CaptureFixture[str], tmp_path: Path
) -> None:
    h = histories["plain"]
    false = shutil.which("false")
    assert false is not None
    out = tmp_path / "out"
    code, said, err = _run(
        capsys, "sheet", h.surface, "--db", h.db, "--out", out, "--chromium", false
    )
    assert code == 2
    assert err.count("\n") == 1 and "printing the sheet failed" in err
    assert "Traceback" not in err
    assert (out / "sheet-lathe-1_front-way.html").is_file()
    assert not list(out.glob("*.pdf")) and not list(out.glob(".sheet-print-*"))


@pytest.mark.parametrize(
    ("args", "message"),
    [
        (["no-such-way"], "sheet: no passes recorded for surface 'no-such-way' (recorded: "),
        (["x", "--chromium", "/no/such/chromium"], "--chromium '/no/such/chromium': no such"),
        (["x", "--paper", "a5"], "Invalid value for '--paper'"),
    ],
)
def test_bad_input_is_one_line_and_exit_2(
    args: list[str],
    message: str,
    histories: dict[str, History],
    capsys: pytest.CaptureFixture[str],
    tmp_path: Path,
) -> None:
    h = histories["plain"]
    out = tmp_path / "out"
    code, said, err = _run(capsys, "sheet", *args, "--db", h.db, "--out", out)
    assert code == 2
    assert said == ""
    assert err.count("\n") == 1 and message in err, err
    assert "Traceback" not in err
    assert not out.exists() or not list(out.iterdir())


def test_no_history_is_one_line_and_exit_2(
    capsys: pytest.CaptureFixture[str], tmp_path: Path
) -> None:
    code, said, err = _run(capsys, "sheet", "front-way", "--db", tmp_path / "none.sqlite")
    assert code == 2 and said == ""
    assert err.count("\n") == 1 and "no history yet" in err
    assert not (tmp_path / "none.sqlite").exists()


@needs_chromium
@pytest.mark.browser
def test_the_heading_check_finds_a_stranded_heading(tmp_path: Path) -> None:
    """The check above on a page made to strand one: a heading pushed to the page's foot
    by a tall block, with nothing keeping it with the text after it."""
    from printcheck.report.sheet import print_pdf

    chromium = _chromium()
    assert chromium is not None
    lowest = {}
    for rule in ("auto", "avoid"):
        page = tmp_path / f"heading-{rule}.html"
        page.write_text(
            "<!DOCTYPE html><html><head><style>@page { size: A4; margin: 15mm; }"
            f"h2 {{ break-after: {rule}; margin: 0; }} p {{ margin: 0; }}</style></head><body>"
            '<p>first</p><div style="height: 250mm"></div><h2>Heading</h2>'
            + "<p>after it</p>" * 3
            + "</body></html>",
            encoding="utf-8",
        )
        pages = _pdf_pages(print_pdf(page, tmp_path / f"heading-{rule}.pdf", chromium=chromium))
        assert len(pages) == 2
        lowest[rule] = min(pages[0].lines)[1]
    assert lowest == {"auto": "Heading", "avoid": "first"}  # the sheet's rule moves it on
