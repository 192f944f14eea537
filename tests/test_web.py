"""``printcheck serve`` against a real uvicorn server on a free localhost port.

The server runs as its own process (``python -m printcheck serve``), exactly as a shop PC
would start it.  Truth comes from the renderer (printcheck.synth): the small job's photos
know how many contact spots they hold.  The browser test drives Debian's chromium with
Playwright (skipped, with the reason, where either is missing).
"""

from __future__ import annotations

import hashlib
import io
import os
import re
import shutil
import socket
import sqlite3
import struct
import subprocess
import sys
import threading
import time
import zlib
from collections.abc import Iterator
from pathlib import Path
from typing import Any

import httpx
import pytest

# Count tolerance of a rendered photo: the same one test_cli.py holds batch to (the
# renderer knows every spot it drew; 15 % or 1 point per cell square).
COUNT_TOLERANCE = 0.15
CHROMIUM = shutil.which("chromium") or shutil.which("chromium-browser")


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return int(s.getsockname()[1])


class Server:
    """A ``printcheck serve`` process and where it keeps things."""

    def __init__(self, root: Path, *extra: str) -> None:
        self.root = root
        self.out = root / "out"
        self.db = root / "history.sqlite"
        self.port = _free_port()
        self.base = f"http://127.0.0.1:{self.port}"
        self.log = root / "serve.log"
        args = [
            sys.executable, "-m", "printcheck", "serve", "--db", str(self.db),
            "--out", str(self.out), "--port", str(self.port), "--jobs", "2", *extra,
        ]  # fmt: skip
        env = {**os.environ, "PYTHONUNBUFFERED": "1"}
        with open(self.log, "w") as log:  # the child keeps its own copy of the descriptor
            self.proc = subprocess.Popen(
                args, stdout=log, stderr=subprocess.STDOUT, env=env, cwd=root
            )
        deadline = time.monotonic() + 60
        while time.monotonic() < deadline:
            if self.proc.poll() is not None:
                raise AssertionError(f"serve ended: {self.log.read_text()}")
            try:
                httpx.get(self.base + "/upload", timeout=2)
                return
            except httpx.TransportError:
                time.sleep(0.2)
        raise AssertionError(f"serve did not answer: {self.log.read_text()}")

    def stop(self) -> None:
        self.proc.terminate()
        try:
            self.proc.wait(timeout=20)
        except subprocess.TimeoutExpired:
            self.proc.kill()
            self.proc.wait()

    def client(self) -> httpx.Client:
        return httpx.Client(base_url=self.base, timeout=60)

    def passes(self, surface: str) -> list[tuple[str, str]]:
        with sqlite3.connect(f"file:{self.db}?mode=ro", uri=True) as con:
            return con.execute(
                "SELECT p.sha256, p.photo FROM passes p JOIN surfaces s ON s.id = p.surface_id "
                "WHERE s.name = ?",
                (surface,),
            ).fetchall()


@pytest.fixture(scope="module")
def server(tmp_path_factory: pytest.TempPathFactory) -> Iterator[Server]:
    s = Server(tmp_path_factory.mktemp("serve"), "--max-upload-mb", "1")
    yield s
    s.stop()


def _csrf(client: httpx.Client) -> str:
    page = client.get("/upload")
    assert page.status_code == 200
    found = re.search(r'name="csrf" value="([^"]+)"', page.text)
    assert found is not None
    return found.group(1)


def _send(
    client: httpx.Client, data: bytes, *, surface: str, name: str = "p.jpg", station: str = ""
) -> httpx.Response:
    return client.post(
        "/upload",
        data={"csrf": _csrf(client), "new_surface": surface, "station": station},
        files={"photo": (name, data, "image/jpeg")},
    )


def _wait(client: httpx.Client, location: str, limit_s: float = 120) -> dict[str, Any]:
    deadline = time.monotonic() + limit_s
    while time.monotonic() < deadline:
        status = client.get(location + "/status").json()
        if status["state"] != "queued":
            return dict(status)
        time.sleep(0.1)
    raise AssertionError(f"{location} not measured in {limit_s} s")


def _reencoded(path: Path, quality: int) -> bytes:
    """The photo re-encoded as JPEG at ``quality``: the same print, other bytes."""
    from PIL import Image

    buffer = io.BytesIO()
    with Image.open(path) as im:
        im.convert("RGB").save(buffer, "JPEG", quality=quality)
    return buffer.getvalue()


# ---------------------------------------------------------------- the pages


def test_upload_measures_records_and_shows_the_pass(server: Server, small_job: Any) -> None:
    folder, photos = small_job
    truth = photos[1]
    data = (folder / truth.file).read_bytes()
    assert len(data) < 1024 * 1024
    with server.client() as client:
        sent = _send(client, data, surface="lathe-bed", station="tailstock end")
        assert sent.status_code == 303
        location = sent.headers["location"]
        status = _wait(client, location)
        assert status["state"] == "done", status
        # truth from the renderer; tolerance as test_cli holds batch to
        assert status["spot_count"] == pytest.approx(truth.spot_count, rel=COUNT_TOLERANCE, abs=4)
        result = client.get(location, follow_redirects=True)
        assert result.status_code == 200
        assert f'id="count">{status["spot_count"]}<' in result.text
        assert "tailstock end" in result.text
        overlay = re.search(r'src="(/pass/overlay\.png\?[^"]+)"', result.text)
        assert overlay is not None
        image = client.get(overlay.group(1).replace("&amp;", "&"))
        assert image.status_code == 200 and image.content[:8] == b"\x89PNG\r\n\x1a\n"
        surface_page = client.get("/surface", params={"s": "lathe-bed"})
        assert surface_page.status_code == 200 and "tailstock end" in surface_page.text
        assert client.get("/surface/trend.png", params={"s": "lathe-bed"}).status_code == 200
        assert "lathe-bed" in client.get("/").text
        # the same photo again: recognised by its hash, not recorded twice
        again = _send(client, data, surface="lathe-bed", name="other-name.jpg")
        assert again.headers["location"] == location
        assert _wait(client, location)["state"] == "done"
    sha = hashlib.sha256(data).hexdigest()
    assert server.passes("lathe-bed") == [(sha, f"{sha}.jpg")]
    # the upload is kept by its hash inside the output folder, as sent
    assert (server.out / "uploads" / f"{sha}.jpg").read_bytes() == data


def test_the_station_is_recorded_in_the_history_and_shown(server: Server, small_job: Any) -> None:
    folder, photos = small_job
    body = _reencoded(folder / photos[0].file, 91)
    with server.client() as client:
        # the upload page offers a station field beside the surface (optional)
        form = client.get("/upload").text
        assert (
            'id="station" name="station"' in form
            and "required" not in form.split('id="station"')[1].split(">")[0]
        )
        sent = _send(client, body, surface="saddle-way", station="<i>middle</i>")
        location = sent.headers["location"]
        assert _wait(client, location)["state"] == "done"
        result = client.get(location, follow_redirects=True).text
        assert 'id="station">&lt;i&gt;middle&lt;/i&gt;<' in result
        # the pass page is the report's: checks, guidance and cell maps from one template
        assert 'class="heat"' in result and "Show the overlay at full size" in result
        # the next photo of the surface: its recorded stations are offered to pick from
        form = client.get("/upload", params={"s": "saddle-way"}).text
        assert '<datalist id="stations"><option value="&lt;i&gt;middle&lt;/i&gt;">' in form
        surface_page = client.get("/surface", params={"s": "saddle-way"}).text
        assert "station &lt;i&gt;middle&lt;/i&gt;" in surface_page
    # the history holds the station (as batch records a station), not only the page
    with sqlite3.connect(f"file:{server.db}?mode=ro", uri=True) as con:
        rows = con.execute(
            "SELECT p.station, p.sha256, p.settings IS NOT NULL, p.method FROM passes p "
            "JOIN surfaces s ON s.id = p.surface_id WHERE s.name = 'saddle-way'"
        ).fetchall()
    from printcheck.method import METHOD_VERSION

    assert rows == [("<i>middle</i>", hashlib.sha256(body).hexdigest(), 1, METHOD_VERSION)]


def test_the_pass_page_lays_the_print_on_the_pass_before(server: Server, small_job: Any) -> None:
    # two passes of one surface sent from the phone: the later pass's page shows where
    # contacts appeared and disappeared, from the contact maps the measurer keeps
    folder, photos = small_job
    first, second = (_reencoded(folder / p.file, 93) for p in photos[:2])
    with server.client() as client:
        for body in (first, second):
            location = _send(client, body, surface="change-way").headers["location"]
            assert _wait(client, location)["state"] == "done"
        page = client.get(location, follow_redirects=True).text
    assert page.count('class="overlay change"') == 1
    assert "Contact appeared on" in page
    maps = server.out / ".contacts"
    assert (maps / f"{hashlib.sha256(second).hexdigest()}.png").is_file()


def test_a_photo_sent_at_a_station_keeps_its_place_in_its_contact_map(
    server: Server, small_job: Any
) -> None:
    # batch records each photo's station and pass in its contact map, and the change
    # since the pass before is only drawn between maps of one station; a photo sent from
    # the phone keeps its place there too, or it would never be compared with a pass
    # that batch recorded at that station
    from printcheck.compare import CONTACTS_FOLDER, contacts_name, read_contacts

    folder, photos = small_job
    body = _reencoded(folder / photos[0].file, 91)
    with server.client() as client:
        location = _send(client, body, surface="placed-way", station="middle").headers["location"]
        assert _wait(client, location)["state"] == "done"
    sha = hashlib.sha256(body).hexdigest()
    cmap = read_contacts(server.out / CONTACTS_FOLDER / contacts_name(sha))
    assert cmap.station == "middle"
    assert cmap.pass_key is not None


def test_stations_sent_one_after_another_make_one_pass(server: Server, small_job: Any) -> None:
    # the fitter walks the bed after a pass, station by station, then scrapes and walks
    # it again: the first round is one pass of two stations, the next starts a pass
    folder, photos = small_job
    bodies = [_reencoded(folder / photos[i].file, q) for i, q in ((0, 88), (1, 88), (2, 88))]
    with server.client() as client:
        for body, station in zip(bodies, ("head end", "tail end", "head end"), strict=True):
            location = _send(client, body, surface="round-way", station=station).headers["location"]
            assert _wait(client, location)["state"] == "done"
    with sqlite3.connect(f"file:{server.db}?mode=ro", uri=True) as con:
        rows = con.execute(
            "SELECT p.sha256, p.station, p.pass_key FROM passes p JOIN surfaces s "
            "ON s.id = p.surface_id WHERE s.name = 'round-way' ORDER BY p.id"
        ).fetchall()
    keys = [key for _, _, key in rows]
    assert [station for _, station, _ in rows] == ["head end", "tail end", "head end"]
    assert keys[0] == keys[1] != keys[2] and all(k.startswith("web ") for k in keys)


def test_web_pass_rule() -> None:
    # the rule by itself: no station, a pass of its own; a station already in the latest
    # phone pass, or that pass's last photo too long ago, or a new pass asked: a new one
    from datetime import UTC, datetime
    from types import SimpleNamespace

    from printcheck.web.measurer import SAME_PASS_S, Job, web_pass

    t0 = datetime(2026, 12, 4, 9, 0, tzinfo=UTC)

    def stored(station: str, key: str | None, minutes: float) -> SimpleNamespace:
        at = t0.timestamp() + 60 * minutes
        when = datetime.fromtimestamp(at, UTC).isoformat(timespec="seconds")
        return SimpleNamespace(station=station, pass_key=key, recorded=when)

    def job(station: str | None, new_pass: bool = False) -> Job:
        return Job("id", "way", "ab" * 32, Path("x.jpg"), "x.jpg", station, new_pass)

    now = t0.timestamp() + 600
    history = [stored("a", "web 1", 0), stored("b", "web 1", 5)]
    assert web_pass(history, job(None), now) is None
    assert web_pass(history, job("c"), now) == "web 1"
    assert web_pass(history, job("a"), now) == "web " + "ab" * 8
    assert web_pass(history, job("c", new_pass=True), now) == "web " + "ab" * 8
    assert web_pass(history, job("c"), t0.timestamp() + 300 + SAME_PASS_S) == "web " + "ab" * 8
    # a batch's pass is never joined
    assert web_pass([stored("a", "pass 3", 9)], job("b"), now) == "web " + "ab" * 8


# ---------------------------------------------------------------- several fitters at once


def test_four_clients_ten_photos_each_all_recorded_once(server: Server, small_job: Any) -> None:
    folder, photos = small_job
    # 40 distinct photos: the job's 3 renders, each re-encoded at several JPEG qualities
    bodies = [_reencoded(folder / photos[k % 3].file, 60 + k) for k in range(40)]
    assert len({hashlib.sha256(b).digest() for b in bodies}) == 40
    results: list[tuple[int, dict[str, Any], int]] = []
    errors: list[BaseException] = []
    lock = threading.Lock()

    def fitter(share: list[bytes]) -> None:
        try:
            with server.client() as client:
                # all ten sent without waiting (a queue builds up), then each result read
                sent = [_send(client, body, surface="load-way") for body in share]
                for answer in sent:
                    status = _wait(client, answer.headers["location"], limit_s=300)
                    page = client.get(answer.headers["location"], follow_redirects=True)
                    with lock:
                        results.append((answer.status_code, status, page.status_code))
        except BaseException as exc:  # reported below, not lost in the thread
            errors.append(exc)

    threads = [threading.Thread(target=fitter, args=(bodies[k::4],)) for k in range(4)]
    for t in threads:
        t.start()
    for t in threads:
        t.join()
    assert not errors, errors
    assert len(results) == 40
    assert all(code == 303 for code, _, _ in results)
    assert all(status["state"] == "done" for _, status, _ in results), results
    assert all(page == 200 for _, _, page in results)
    stored = server.passes("load-way")
    assert sorted(sha for sha, _ in stored) == sorted(hashlib.sha256(b).hexdigest() for b in bodies)


# ---------------------------------------------------------------- safety


def _files_outside(root: Path, out: Path) -> set[Path]:
    return {p for p in root.rglob("*") if out not in p.parents and p != out and p.is_file()} - {
        root / "serve.log"
    }


def test_hostile_names_write_nothing_outside_and_are_escaped(
    server: Server, small_job: Any
) -> None:
    folder, photos = small_job
    before = _files_outside(server.root, server.out)
    hostile = ["../../x.jpg", "<script>alert(1)</script>.jpg"]
    with server.client() as client:
        for k, name in enumerate(hostile):
            body = _reencoded(folder / photos[0].file, 95 - k)
            sent = _send(client, body, surface="<b>odd</b> way", name=name)
            assert sent.status_code == 303
            assert _wait(client, sent.headers["location"])["state"] == "done"
            page = client.get(sent.headers["location"], follow_redirects=True).text
            assert "<script>alert(1)" not in page and "<b>odd</b>" not in page
            assert "&lt;b&gt;odd&lt;/b&gt;" in page
        assert "&lt;script&gt;alert(1)&lt;/script&gt;.jpg" in page
    after = _files_outside(server.root, server.out)
    # only the history's own files may appear beside the output folder
    assert {p.name for p in after - before} <= {"history.sqlite-wal", "history.sqlite-shm"}
    assert not (server.root.parent / "x.jpg").exists()
    assert not (server.out.parent.parent / "x.jpg").exists()
    names = {p.name for p in (server.out / "uploads").iterdir()}
    assert all(re.fullmatch(r"[0-9a-f]{64}\.jpg|index\.jsonl", n) for n in names), names


def _bomb_png(width: int, height: int) -> bytes:
    """A PNG whose header claims width x height (ISO/IEC 15948 IHDR) with almost no data."""

    def chunk(kind: bytes, data: bytes) -> bytes:
        return (
            struct.pack(">I", len(data)) + kind + data + struct.pack(">I", zlib.crc32(kind + data))
        )

    ihdr = struct.pack(">IIBBBBB", width, height, 8, 2, 0, 0, 0)
    body = b"\x89PNG\r\n\x1a\n" + chunk(b"IHDR", ihdr) + chunk(b"IDAT", zlib.compress(b"\0" * 64))
    return body + chunk(b"IEND", b"")


@pytest.mark.parametrize(
    ("body", "status", "words"),
    [
        (b"\xff\xd8\xff" + os.urandom(1024 * 1024 + 200 * 1024), 413, "larger than 1 MB"),
        (b"G90 G21\nG0 X0 Y0\n" * 50, 415, "not an image"),
        (_bomb_png(40000, 40000), 415, "pixels; refused"),
        (b"", 415, "empty"),
    ],
    ids=["oversized", "not-an-image", "decompression-bomb", "empty"],
)
def test_bad_uploads_are_refused_with_a_message(
    server: Server, body: bytes, status: int, words: str
) -> None:
    with server.client() as client:
        sent = _send(client, body, surface="refused-way", name="x.jpg")
        assert sent.status_code == status
        assert words in sent.text
        assert client.get("/upload").status_code == 200  # still serving
    assert server.passes("refused-way") == []


def test_truncated_photo_is_refused(server: Server, small_job: Any) -> None:
    folder, photos = small_job
    data = (folder / photos[2].file).read_bytes()
    with server.client() as client:
        sent = _send(client, data[: len(data) // 2], surface="refused-way")
        assert sent.status_code == 415 and "truncated" in sent.text


def test_photo_without_the_card_says_why_on_the_page(server: Server) -> None:
    from PIL import Image

    buffer = io.BytesIO()
    Image.new("RGB", (640, 480), (150, 160, 170)).save(buffer, "JPEG")
    with server.client() as client:
        sent = _send(client, buffer.getvalue(), surface="no-card-way")
        assert sent.status_code == 303  # a whole image: accepted, then measured
        status = _wait(client, sent.headers["location"])
        assert status["state"] == "failed" and status["message"].startswith("the photo ")
        page = client.get(sent.headers["location"])
        assert page.status_code == 422 and 'id="message"' in page.text
        assert "uploads" not in status["message"]  # the stored file's path is not shown
    assert server.passes("no-card-way") == []


def test_form_without_its_csrf_token_is_refused(server: Server, small_job: Any) -> None:
    folder, photos = small_job
    with server.client() as client:
        client.get("/upload")
        sent = client.post(
            "/upload",
            data={"csrf": "forged", "new_surface": "csrf-way"},
            files={"photo": ("p.jpg", (folder / photos[0].file).read_bytes(), "image/jpeg")},
        )
        assert sent.status_code == 403
    assert server.passes("csrf-way") == []


def test_beyond_localhost_nothing_without_the_access_code(tmp_path: Path) -> None:
    lan = Server(tmp_path, "--lan")
    try:
        text = lan.log.read_text()
        found = re.search(r"access code: (\w+)", text)
        assert found is not None, text
        code = found.group(1)
        assert f"?code={code}" in text  # the address the QR code holds
        with lan.client() as client:
            for path in ("/", "/upload", "/surface?s=x", "/pass/overlay.png"):
                assert client.get(path).status_code == 403
            assert client.post("/upload", data={"x": "1"}).status_code == 403
            assert client.get("/upload", params={"code": "wrong" + code}).status_code == 403
            entered = client.get("/upload", params={"code": code})
            assert entered.status_code == 303 and "code=" not in entered.headers["location"]
            assert client.get("/upload").status_code == 200  # the cookie carries it now
    finally:
        lan.stop()


def test_heic_from_a_phone_is_measured(server: Server, small_job: Any) -> None:
    pillow_heif = pytest.importorskip("pillow_heif")
    from PIL import Image

    folder, photos = small_job
    truth = photos[0]
    pillow_heif.register_heif_opener()
    buffer = io.BytesIO()
    with Image.open(folder / truth.file) as im:
        im.convert("RGB").save(buffer, "HEIF", quality=90)
    data = buffer.getvalue()
    with server.client() as client:
        sent = _send(client, data, surface="heic-way", name="IMG_0001.HEIC")
        assert sent.status_code == 303, sent.text
        status = _wait(client, sent.headers["location"])
        assert status["state"] == "done", status
        assert status["spot_count"] == pytest.approx(truth.spot_count, rel=COUNT_TOLERANCE, abs=4)
    sha = hashlib.sha256(data).hexdigest()
    assert (server.out / "uploads" / f"{sha}.heic").read_bytes() == data


def test_serve_refuses_bad_options_with_one_line(capsys: pytest.CaptureFixture[str]) -> None:
    from printcheck.cli import main

    assert main(["serve", "--lan", "--host", "10.0.0.5"]) == 2
    assert main(["serve", "--port", "0"]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert err == [
        "printcheck: give --lan or --host, not both",
        "printcheck: --port must be between 1 and 65535, got 0",
    ]


# ---------------------------------------------------------------- a real browser


@pytest.mark.browser
@pytest.mark.skipif(CHROMIUM is None, reason="chromium is not installed (apt-get install chromium)")
def test_phone_sized_browser_sends_a_photo_and_sees_the_count(
    server: Server, small_job: Any, tmp_path: Path
) -> None:
    sync_api = pytest.importorskip("playwright.sync_api", reason="playwright is not installed")
    folder, photos = small_job
    truth = photos[2]
    dialogs: list[str] = []
    with sync_api.sync_playwright() as pw:
        browser = pw.chromium.launch(executable_path=CHROMIUM, args=["--no-sandbox"])
        try:
            page = browser.new_page(viewport={"width": 390, "height": 844}, device_scale_factor=2)

            def on_dialog(dialog: Any) -> None:
                dialogs.append(dialog.message)
                dialog.dismiss()

            page.on("dialog", on_dialog)
            page.goto(server.base + "/upload")
            assert page.get_attribute("#photo", "capture") == "environment"
            page.fill("#new_surface", "cross-slide")
            page.fill("#station", "front")
            page.set_input_files("#photo", str(folder / truth.file))
            page.click("button[type=submit]")
            page.wait_for_selector("#count", timeout=120_000)
            count = int(page.inner_text("#count"))
            assert count == pytest.approx(truth.spot_count, rel=COUNT_TOLERANCE, abs=4)
            assert page.evaluate("document.documentElement.scrollWidth") <= 390
            assert page.evaluate(
                "Array.from(document.images).every(i => i.complete && i.naturalWidth > 0)"
            )
            shot = tmp_path / "web-result-390px.png"
            page.screenshot(path=str(shot), full_page=True)
            print(f"screenshot: {shot}")
            page.click("text=cross-slide")
            page.wait_for_selector("table.passes")
            rows = page.locator("table.passes tr").count()
            assert rows == 2  # the header and the new pass
            assert page.evaluate("document.documentElement.scrollWidth") <= 390
            page.screenshot(path=str(tmp_path / "web-surface-390px.png"), full_page=True)
            # a hostile file name runs nothing in the page
            page.goto(server.base + "/upload")
            page.fill("#new_surface", "cross-slide")
            page.set_input_files(
                "#photo",
                files=[
                    {
                        "name": "<img src=x onerror=alert(1)>.jpg",
                        "mimeType": "image/jpeg",
                        "buffer": _reencoded(folder / truth.file, 77),
                    }
                ],
            )
            page.click("button[type=submit]")
            page.wait_for_selector("#count", timeout=120_000)
            assert page.inner_text("#sent-name") == "<img src=x onerror=alert(1)>.jpg"
        finally:
            browser.close()
    assert dialogs == []
