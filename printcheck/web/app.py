"""The Starlette application: the surfaces, one surface, one pass, the upload page.

Pages are rendered from printcheck's one set of Jinja2 templates (``printcheck/templates``,
shared with the offline report; autoescape on: every name from outside is escaped);
they need no script: the progress page refreshes itself with ``<meta http-equiv=refresh>``
until its photo has been measured.  Nothing outside the history and the output folder is
read or written: there is no static-file route; images come from the output folder by
names printcheck makes itself (never from a name sent by a client).
"""

from __future__ import annotations

import re
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any
from urllib.parse import urlencode

from jinja2 import Environment
from starlette.applications import Starlette
from starlette.concurrency import run_in_threadpool
from starlette.formparsers import MultiPartException
from starlette.requests import Request
from starlette.responses import HTMLResponse, RedirectResponse, Response
from starlette.routing import Route

from printcheck.errors import PhotoError, PrintcheckError
from printcheck.report.views import legend_items
from printcheck.web.measurer import DONE, FAILED, Measurer
from printcheck.web.security import AccessCode, csrf_ok, csrf_token, keep_csrf
from printcheck.web.uploads import UploadIndex, check_photo_bytes, store_upload
from printcheck.wording import sentence

__all__ = ["WebConfig", "create_app"]

#: Default upload limit: a 12 MP phone JPEG is 3-8 MB, a HEIC less, a 16-bit TIFF more.
MAX_UPLOAD_BYTES = 40 * 1024 * 1024
_NAME_MAX = 80
_SHA = re.compile(r"^[0-9a-f]{64}$")
_JOB = re.compile(r"^[0-9a-f]{24}$")


@dataclass
class WebConfig:
    """What the application serves: the history, the output folder, the limits."""

    db: Path
    out: Path
    access_code: str | None = None
    max_upload_bytes: int = MAX_UPLOAD_BYTES
    default_surface: str | None = None
    watch: Path | None = None
    extra: dict[str, Any] = field(default_factory=dict)


def _environment() -> Environment:
    """The one environment of printcheck's pages (shared with the offline report)."""
    from printcheck.report.templating import environment

    return environment()


def _clean_name(text: Any, limit: int = _NAME_MAX) -> str:
    """A surface or station name from a form: printable, trimmed, at most ``limit``."""
    value = "".join(ch for ch in str(text or "") if ch.isprintable()).strip()
    return value[:limit]


# ---------------------------------------------------------------- reading the history


@dataclass
class SurfaceView:
    name: str
    passes: list[Any]
    progress: Any
    words: str
    latest: Any  # the latest pass as the progress has it (ProgressRow): all its stations
    progress_spec: Any = None
    per: str = ""  # the density's unit in words


def _surface_view(history: Any, name: str) -> SurfaceView | None:
    from printcheck.progress import history_progress, projection_words, surface_spec
    from printcheck.wording import cell_words

    stored = history.passes(name)
    if not stored:
        return None
    # the history's own progress: a pass of several stations is one pass
    spec = surface_spec(stored)
    progress = history_progress(name, stored, spec=spec)
    words = projection_words(progress)
    per = cell_words(progress.cell, progress.unit)
    latest = progress.passes[-1]
    return SurfaceView(name, stored, progress, sentence(words), latest, spec, per)


def _read(db: Path, work: Any) -> Any:
    from printcheck.history import open_history

    with open_history(db, readonly=True) as history:
        return work(history)


def create_app(config: WebConfig, measurer: Measurer) -> Starlette:
    """The application over ``measurer`` (started and stopped by the caller)."""
    env = _environment()
    index = UploadIndex(config.out)
    # Uploads are held in memory up to the limit (never spooled to the system's temporary
    # folder): nothing outside the output folder is written.
    from starlette import formparsers

    formparsers.MultiPartParser.spool_max_size = config.max_upload_bytes + 1

    def page(request: Request, template: str, status: int = 200, **context: Any) -> Response:
        context.setdefault("csrf", csrf_token(request))
        html = env.get_template(template).render(request=request, **context)
        response = HTMLResponse(html, status_code=status)
        response.headers["Content-Security-Policy"] = (
            "default-src 'none'; img-src 'self' data:; style-src 'unsafe-inline'; "
            "form-action 'self'; base-uri 'none'; frame-ancestors 'none'"
        )
        response.headers["X-Content-Type-Options"] = "nosniff"
        response.headers["Referrer-Policy"] = "no-referrer"
        return keep_csrf(request, response)

    def problem(request: Request, message: str, status: int) -> Response:
        return page(request, "message.html", status=status, title="Not sent", message=message)

    async def surfaces(request: Request) -> Response:
        def work(history: Any) -> list[SurfaceView]:
            views = [_surface_view(history, name) for name in history.surfaces()]
            return [v for v in views if v is not None]

        views = await run_in_threadpool(_read, config.db, work)
        return page(request, "surfaces.html", views=views, pending=measurer.pending())

    async def surface(request: Request) -> Response:
        name = request.query_params.get("s", "")
        view = await run_in_threadpool(_read, config.db, lambda h: _surface_view(h, name))
        if view is None:
            return problem(request, f"No passes recorded for the surface {name!r}.", 404)
        uploads = await run_in_threadpool(index.rows, name)
        return page(request, "surface.html", view=view, uploads=uploads)

    async def trend(request: Request) -> Response:
        from printcheck.report.plots import trend_png

        name = request.query_params.get("s", "")
        view = await run_in_threadpool(_read, config.db, lambda h: _surface_view(h, name))
        if view is None:
            return Response(status_code=404)
        png = await run_in_threadpool(trend_png, view.progress)
        return Response(png, media_type="image/png", headers={"Cache-Control": "no-store"})

    def _stored(history: Any, name: str, sha: str) -> Any:
        return next((p for p in history.passes(name) if p.summary.sha256 == sha), None)

    def _find(history: Any, name: str, sha: str) -> tuple[SurfaceView, Any] | None:
        view = _surface_view(history, name)
        if view is None:
            return None
        for stored in view.passes:
            if stored.summary.sha256 == sha:
                return view, stored
        return None

    async def one_pass(request: Request) -> Response:
        name = request.query_params.get("s", "")
        sha = request.query_params.get("sha", "")
        found = await run_in_threadpool(_read, config.db, lambda h: _find(h, name, sha))
        if found is None:
            return problem(request, "No such pass in the history.", 404)
        view, stored = found
        uploads = await run_in_threadpool(index.rows, name)
        upload = uploads.get(sha, {})
        return page(
            request,
            "pass.html",
            view=view,
            v=_pass_view(view, stored, upload.get("station"), config.out),
            legend_items=legend_items(),
            upload=upload,
            fresh=request.query_params.get("new") == "1",
        )

    async def overlay(request: Request) -> Response:
        from printcheck.report.files import OVERLAY_SUFFIX, output_stem

        name = request.query_params.get("s", "")
        sha = request.query_params.get("sha", "")
        if not _SHA.match(sha):
            return Response(status_code=404)
        # the photo's name from its row alone (no progress is worked out for an image)
        stored = await run_in_threadpool(_read, config.db, lambda h: _stored(h, name, sha))
        if stored is None:
            return Response(status_code=404)
        # the name printcheck gave the overlay, in the output folder, nowhere else
        stem = output_stem(config.out, stored.summary.photo, stored.summary.sha256)
        path = config.out / (stem + OVERLAY_SUFFIX)
        try:
            data = await run_in_threadpool(path.read_bytes)
        except OSError:
            return Response(status_code=404)
        return Response(data, media_type="image/png", headers={"Cache-Control": "no-store"})

    async def upload_form(request: Request) -> Response:
        chosen = _clean_name(request.query_params.get("s") or config.default_surface or "")

        def work(history: Any) -> tuple[list[str], list[str]]:
            names = history.surfaces()
            stations: list[str] = []
            if chosen in names:
                for p in history.passes(chosen):
                    if p.station and p.station not in stations:
                        stations.append(p.station)
            return names, stations

        known, stations = await run_in_threadpool(_read, config.db, work)
        return page(
            request,
            "upload.html",
            surfaces=known,
            chosen=chosen,
            stations=stations,
            station=_clean_name(request.query_params.get("st")),
            limit_mb=config.max_upload_bytes // (1024 * 1024),
        )

    async def upload(request: Request) -> Response:
        length = request.headers.get("content-length")
        limit = config.max_upload_bytes
        if length is None or not length.isdigit():
            # every browser sends the length of a form; without it the size is unknown
            # until the whole body has been read
            return problem(request, "The upload did not say its size; send it again.", 411)
        if int(length) > limit + 64 * 1024:
            return problem(request, _too_big(limit), 413)
        try:
            form = await request.form(max_files=1, max_fields=8, max_part_size=64 * 1024)
        except MultiPartException as exc:
            return problem(request, f"The form could not be read: {exc}", 400)
        try:
            if not csrf_ok(request, form.get("csrf")):
                return problem(
                    request, "The form has expired; open the upload page again and resend.", 403
                )
            surface_name = _clean_name(form.get("new_surface")) or _clean_name(form.get("surface"))
            station = _clean_name(form.get("station")) or None
            new_pass = form.get("new_pass") == "1"
            photo = form.get("photo")
            if not surface_name:
                return problem(request, "Pick a surface (or name a new one) for the photo.", 400)
            if photo is None or isinstance(photo, str) or not photo.filename:
                return problem(request, "Choose a photo to send.", 400)
            sent_name = _clean_name(photo.filename, 200)
            data = await photo.read(limit + 1)
        finally:
            await form.close()
        if len(data) > limit:
            return problem(request, _too_big(limit), 413)
        try:
            checked = await run_in_threadpool(check_photo_bytes, data, label="the photo")
            path = await run_in_threadpool(store_upload, config.out, data, checked)
        except PhotoError as exc:
            text = str(exc)
            return problem(request, sentence(text) + ".", 415)
        except PrintcheckError as exc:
            return problem(request, str(exc), 500)
        await run_in_threadpool(
            index.add,
            sha256=checked.sha256,
            surface=surface_name,
            station=station,
            sent_name=sent_name,
        )
        job = measurer.submit(
            path,
            surface=surface_name,
            sha256=checked.sha256,
            sent_name=sent_name,
            station=station,
            new_pass=new_pass,
        )
        return RedirectResponse(f"/job/{job.id}", status_code=303)

    async def job_page(request: Request) -> Response:
        jid = request.path_params["jid"]
        job = measurer.job(jid) if _JOB.match(jid) else None
        if job is None:
            return problem(request, "No such photo in this session of the server.", 404)
        if job.state == DONE:
            target = "/pass?" + urlencode({"s": job.surface, "sha": job.sha256, "new": "1"})
            return RedirectResponse(target, status_code=303)
        return page(
            request,
            "job.html",
            job=job,
            failed=job.state == FAILED,
            ahead=measurer.ahead_of(job),
            status=422 if job.state == FAILED else 200,
        )

    async def job_status(request: Request) -> Response:
        from starlette.responses import JSONResponse

        jid = request.path_params["jid"]
        job = measurer.job(jid) if _JOB.match(jid) else None
        if job is None:
            return JSONResponse({"state": "unknown"}, status_code=404)
        return JSONResponse(
            {
                "state": job.state,
                "surface": job.surface,
                "sha256": job.sha256,
                "spot_count": job.spot_count,
                "recorded": job.recorded,
                "message": job.message,
                "seconds": round(job.seconds, 3),
            }
        )

    routes = [
        Route("/", surfaces),
        Route("/surface", surface),
        Route("/surface/trend.png", trend),
        Route("/pass", one_pass),
        Route("/pass/overlay.png", overlay),
        Route("/upload", upload_form, methods=["GET"]),
        Route("/upload", upload, methods=["POST"]),
        Route("/job/{jid}", job_page),
        Route("/job/{jid}/status", job_status),
    ]
    app = Starlette(routes=routes)
    app.add_middleware(AccessCode, code=config.access_code)
    return app


def _too_big(limit: int) -> str:
    return (
        f"The photo is larger than {limit // (1024 * 1024)} MB; send the camera's "
        "normal JPEG or HEIC, not a RAW file."
    )


def _pass_view(
    view: SurfaceView, stored: Any, sent_station: str | None, folder: Path | None = None
) -> Any:
    """The shared view of a pass (as the report shows it), its images from the routes;
    the change since the pass before at the same station, its contacts laid on this
    pass's from the maps kept in ``folder`` (the output folder)."""
    from printcheck.report.views import pass_view

    previous = None
    for earlier in view.passes:
        if earlier is stored:
            break
        if earlier.station == stored.station and earlier.number < stored.number:
            previous = earlier.summary
    image = "/pass/overlay.png?" + urlencode({"s": view.name, "sha": stored.summary.sha256})
    spec = stored.spec if stored.spec is not None else view.progress_spec
    return pass_view(
        stored.number,
        stored.summary,
        spec,
        previous=previous,
        maps=folder,
        overlay_src=image,
        overlay_href=image,
        station=stored.station or sent_station,
    )
