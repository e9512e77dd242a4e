"""The FastAPI application factory."""

from __future__ import annotations

import json
import math
import sqlite3
import traceback
from contextlib import asynccontextmanager
from datetime import datetime, timezone
from pathlib import Path

from fastapi import FastAPI, HTTPException, Request
from fastapi.exceptions import RequestValidationError
from fastapi.responses import FileResponse, JSONResponse
from fastapi.staticfiles import StaticFiles
from fastapi.templating import Jinja2Templates
from jinja2 import Environment, FileSystemLoader, select_autoescape

from .. import __version__, config, formatting
from ..config import ServerSettings
from ..core.registry import MEASURES, PARTIAL_MEASURES
from ..errors import SettingsError
from ..ingest import IngestError
from ..jobs import JobManager
from ..store import Store, UploadTooLarge, is_disk_full
from ..formatting import embed_json
from .workspace import Conflict, NotFound, Workspace
from .models import describe_errors
from .security import RequestGuard, refuse_request

__all__ = ["create_app", "UPLOAD_PATHS"]

UPLOAD_PATHS = ("/api/datasets", "/upload")
# Multipart framing around the file: boundaries, headers, the field name.
_MULTIPART_SLACK = 64 * 1024


def _plotly_js() -> Path:
    import plotly

    return Path(plotly.__file__).resolve().parent / "package_data" / "plotly.min.js"


def _fmt(v, digits: int = 3) -> str:
    """The one number rule of :mod:`pairlens.formatting` (``digits`` kept for old templates, ignored)."""
    if v is not None and not isinstance(v, (int, float)):
        try:
            float(v)
        except (TypeError, ValueError):
            return str(v)
    return formatting.fmt(v)


def _rawnum(v) -> str:
    """Full-precision number for a data attribute (repr round-trips); empty when missing."""
    if v is None:
        return ""
    v = float(v)
    return repr(v) if math.isfinite(v) else ""


def _when(ts) -> str:
    if ts is None:
        return "–"
    return datetime.fromtimestamp(float(ts), tz=timezone.utc).strftime("%Y-%m-%d %H:%M UTC")


def _size(n) -> str:
    n = float(n)
    for unit in ("B", "KB", "MB", "GB"):
        if n < 1024 or unit == "GB":
            return f"{n:.0f} {unit}" if unit == "B" else f"{n:.1f} {unit}"
        n /= 1024
    return f"{n:.1f} GB"


def _sparkline(counts, width: int = 96, height: int = 22) -> str:
    """Inline SVG bars of a histogram; numbers only, so nothing in it needs escaping."""
    from markupsafe import Markup

    if not counts:
        return Markup("")
    top = max(counts) or 1
    k = len(counts)
    bar = width / k
    parts = [f'<svg class="spark" width="{width}" height="{height}" viewBox="0 0 {width} {height}" '
             f'role="img" aria-label="distribution sketch">']
    for i, c in enumerate(counts):
        h = (height - 1) * (c / top)
        parts.append(f'<rect x="{i * bar:.2f}" y="{height - h:.2f}" width="{max(bar - 1, 0.5):.2f}" '
                     f'height="{h:.2f}"></rect>')
    parts.append("</svg>")
    return Markup("".join(parts))


def make_templates() -> Jinja2Templates:
    env = Environment(loader=FileSystemLoader(str(config.TEMPLATES_DIR)),
                      autoescape=select_autoescape(default=True, default_for_string=True))
    env.filters.update(fmt=_fmt, fmt_p=formatting.fmt_p, fmt_est=formatting.fmt_est, fmt_count=formatting.fmt_count,
                       fmt_interval=formatting.fmt_interval, fmt_share=formatting.fmt_share, rawnum=_rawnum, when=_when, size=_size, sparkline=_sparkline,
                       embed_json=embed_json)
    env.globals.update(MEASURES={**MEASURES, **PARTIAL_MEASURES}, config=config, version=__version__)
    return Jinja2Templates(env=env)


class UploadLimit:
    """ASGI middleware: answers 413 for uploads over the limit without reading them whole.

    A declared Content-Length over the limit is refused before any body is read;
    otherwise the body is counted as it streams and the request is stopped as
    soon as it passes the limit.
    """

    def __init__(self, app, max_bytes: int) -> None:
        self.app = app
        self.max_bytes = int(max_bytes)

    async def __call__(self, scope, receive, send):
        if scope["type"] != "http" or scope["method"] != "POST" or scope["path"] not in UPLOAD_PATHS:
            await self.app(scope, receive, send)
            return
        limit = self.max_bytes + _MULTIPART_SLACK
        is_api = scope["path"].startswith("/api/")
        for name, value in scope.get("headers", ()):
            if name == b"content-length":
                try:
                    declared = int(value)
                except ValueError:
                    declared = 0
                if declared > limit:
                    await _too_large(send, self.max_bytes, is_api)
                    return
        received = 0
        started = False

        async def counting_receive():
            nonlocal received
            message = await receive()
            if message["type"] == "http.request":
                received += len(message.get("body", b""))
                if received > limit:
                    raise _BodyTooLarge()
            return message

        async def tracking_send(message):
            nonlocal started
            if message["type"] == "http.response.start":
                started = True
            await send(message)

        try:
            await self.app(scope, counting_receive, tracking_send)
        except _BodyTooLarge:
            if not started:
                await _too_large(send, self.max_bytes, is_api)


class _BodyTooLarge(HTTPException):
    # An HTTPException so that FastAPI's body parsing passes it through unchanged.
    def __init__(self) -> None:
        super().__init__(status_code=413, detail="upload too large")


def _limit_message(max_bytes: int) -> str:
    return f"the file is larger than the upload limit of {max_bytes // (1024 * 1024)} MB"


async def _too_large(send, max_bytes: int, is_api: bool) -> None:
    # The body is not read any further, so the connection cannot be reused.
    await refuse_request(send, 413, _limit_message(max_bytes), is_api, extra=[(b"connection", b"close")])


def _wants_json(request: Request) -> bool:
    return request.url.path.startswith("/api/")


def create_app(settings: ServerSettings | None = None, *, jobs: JobManager | None = None) -> FastAPI:
    """Build the dashboard for ``settings`` (data directory, upload limit, demo, cluster).

    The job manager starts with the app's lifespan and stops with it; pass
    ``jobs`` to supply one (tests).
    """
    settings = settings or ServerSettings()
    data_dir = Path(settings.data_dir) if settings.data_dir else config.default_data_dir()
    store = Store(data_dir)
    jobs = jobs or JobManager(store, cluster=settings.cluster)
    workspace = Workspace(store, jobs, max_upload_mb=settings.max_upload_mb, cluster=settings.cluster)
    if jobs.on_done is None:
        jobs.on_done = workspace.warm

    @asynccontextmanager
    async def lifespan(app: FastAPI):
        jobs.start()
        if settings.demo:
            app.state.demo_id = workspace.ensure_demo().id
        try:
            yield
        finally:
            jobs.shutdown()

    # No Swagger UI: FastAPI's loads its assets from a CDN and the tool must work offline.
    # The machine-readable schema stays at /api/openapi.json.
    app = FastAPI(title="pairlens", version=__version__, lifespan=lifespan, docs_url=None,
                  redoc_url=None, openapi_url="/api/openapi.json")
    app.state.settings = settings
    app.state.workspace = workspace
    app.state.templates = make_templates()
    app.state.demo_id = None
    app.add_middleware(UploadLimit, max_bytes=settings.max_upload_mb * 1024 * 1024)
    # Added last, so outermost: foreign hosts, cross-site writes and missing tokens are
    # refused before any body is read.
    app.add_middleware(RequestGuard, host=settings.host, port=settings.port, token=settings.token,
                       max_body_bytes=config.MAX_REQUEST_BODY_KB * 1024, upload_paths=UPLOAD_PATHS)

    def error(request: Request, status: int, detail: str):
        if _wants_json(request):
            return JSONResponse({"detail": detail}, status_code=status)
        return app.state.templates.TemplateResponse(request, "error.html", {"status": status, "detail": detail},
                                                    status_code=status)

    @app.exception_handler(NotFound)
    async def _not_found(request: Request, exc: NotFound):
        return error(request, 404, str(exc))

    @app.exception_handler(Conflict)
    async def _conflict(request: Request, exc: Conflict):
        return error(request, 409, str(exc))

    @app.exception_handler(SettingsError)
    async def _settings_error(request: Request, exc: SettingsError):
        return error(request, 422, " ".join(str(exc).split()))

    @app.exception_handler(IngestError)
    async def _ingest_error(request: Request, exc: IngestError):
        return error(request, 422, " ".join(str(exc).split()))

    @app.exception_handler(UploadTooLarge)
    async def _upload_too_large(request: Request, exc: UploadTooLarge):
        return error(request, 413, _limit_message(workspace.max_upload_bytes))

    @app.exception_handler(RequestValidationError)
    async def _validation(request: Request, exc: RequestValidationError):
        return error(request, 422, describe_errors(exc.errors(), exc.body))

    @app.exception_handler(HTTPException)
    async def _http(request: Request, exc: HTTPException):
        detail = exc.detail if isinstance(exc.detail, str) else json.dumps(exc.detail)
        if exc.status_code == 413:
            detail = _limit_message(workspace.max_upload_bytes)
        return error(request, exc.status_code, detail)

    @app.exception_handler(OSError)
    async def _os_error(request: Request, exc: OSError):
        return _storage_error(request, exc)

    @app.exception_handler(sqlite3.Error)
    async def _sqlite_error(request: Request, exc: sqlite3.Error):
        return _storage_error(request, exc)

    def _storage_error(request: Request, exc: BaseException):
        if is_disk_full(exc):
            return error(request, 507, f"the disk holding the workspace ({data_dir}) is full: free some space "
                                       "and try again")
        if isinstance(exc, sqlite3.DatabaseError) and not isinstance(exc, sqlite3.OperationalError):
            return error(request, 500, f"the database {store.db_path} is damaged ({exc}): stop the server, move "
                                       "the file aside or restore it from a backup")
        traceback.print_exception(exc)
        return error(request, 500, f"internal error ({type(exc).__name__}); the server log has the details")

    @app.exception_handler(Exception)
    async def _internal(request: Request, exc: Exception):
        # A JSON (or page) answer instead of a plain-text 500; the log keeps the traceback.
        traceback.print_exception(exc)
        return error(request, 500, f"internal error ({type(exc).__name__}); the server log has the details")

    from starlette.exceptions import HTTPException as StarletteHTTPException

    @app.exception_handler(StarletteHTTPException)
    async def _starlette_http(request: Request, exc: StarletteHTTPException):
        detail = exc.detail if isinstance(exc.detail, str) else "error"
        return error(request, exc.status_code, detail)

    plotly_path = _plotly_js()

    @app.get("/vendor/plotly.min.js", include_in_schema=False)
    async def plotly_js():
        return FileResponse(plotly_path, media_type="text/javascript",
                            headers={"Cache-Control": "public, max-age=86400"})

    @app.get("/favicon.ico", include_in_schema=False)
    async def favicon():
        return FileResponse(config.STATIC_DIR / "pairlens-icon.svg", media_type="image/svg+xml")

    app.mount("/static", StaticFiles(directory=str(config.STATIC_DIR)), name="static")

    from . import api, pages

    app.include_router(api.router)
    app.include_router(pages.router)
    return app
