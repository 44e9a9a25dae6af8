"""The dashboard's web application: a thin FastAPI layer over ``analysis/``.

:func:`create_app` checks the archive folder, includes one APIRouter module per
concern (runs, series, upload, jobs, configs), any optional router that is
installed (the comparison page), serves plotly.js from the installed plotly
package, and serves the static pages of ``web/``. One error shape everywhere:
``{"error": {"type": ..., "message": ...}}``.
"""

from __future__ import annotations

import importlib
import logging
import shutil
import tempfile
from collections.abc import AsyncIterator, Mapping
from contextlib import asynccontextmanager
from pathlib import Path
from types import ModuleType
from typing import Any

import plotly
from fastapi import FastAPI, Request
from fastapi.exceptions import RequestValidationError
from fastapi.responses import FileResponse, JSONResponse
from fastapi.staticfiles import StaticFiles
from starlette.exceptions import HTTPException as StarletteHTTPException

from analysis import __version__
from analysis.archive.store import Archive
from analysis.errors import ArchiveError, OutriggerError
from server.api import configs as routes_configs
from server.api import export as routes_export
from server.api import fleet as routes_fleet
from server.api import jobs as routes_jobs
from server.api import meta as routes_meta
from server.api import pictures as routes_pictures
from server.api import runs as routes_runs
from server.api import series as routes_series
from server.api import upload as routes_upload
from server.jobs import JobManager
from server.run_cache import DEFAULT_CACHE_MB, RunCache

log = logging.getLogger("outrigger.server")

#: Route modules always included, in OpenAPI order.
ROUTERS: tuple[ModuleType, ...] = (
    routes_meta,
    routes_runs,
    routes_export,
    routes_series,
    routes_upload,
    routes_jobs,
    routes_configs,
    routes_pictures,
    routes_fleet,
)

#: Route modules included when they import (each exposes ``router``); added by later features.
OPTIONAL_ROUTERS: tuple[str, ...] = ("server.api.compare",)

#: The static front end shipped with the package.
WEB_DIR = Path(__file__).resolve().parent.parent / "web"

#: URL under which plotly.js is served.
PLOTLY_URL = "/vendor/plotly.min.js"


def plotly_js_path() -> Path:
    """The plotly.js bundle inside the installed plotly Python package."""
    path = Path(plotly.__file__).resolve().parent / "package_data" / "plotly.min.js"
    if not path.is_file():
        raise ArchiveError(
            f"plotly.js was not found at {path}; reinstall the 'plotly' Python package "
            "(the dashboard never loads it from the internet)."
        )
    return path


def error_body(kind: str, message: str) -> dict[str, dict[str, str]]:
    """The one JSON error shape the pages show as-is."""
    return {"error": {"type": kind, "message": message}}


def validation_part(err: Mapping[str, Any]) -> str:
    """One request validation error as ``where: what`` (never an empty ``where``)."""
    loc = [str(p) for p in err.get("loc", ())]
    if err.get("type") == "json_invalid":
        ctx = err.get("ctx") or {}
        at = f" at character {loc[-1]}" if len(loc) > 1 else ""
        return f"request body: not valid JSON ({ctx.get('error', 'decode error')}{at})"
    where = ".".join(p for p in loc if p != "body") or "request body"
    return f"{where}: {err.get('msg', 'invalid')}"


def _load_optional(names: tuple[str, ...]) -> list[ModuleType]:
    modules = []
    for name in names:
        try:
            module = importlib.import_module(name)
        except ModuleNotFoundError as exc:
            if exc.name == name:
                continue  # feature not part of this build
            raise
        if hasattr(module, "router"):
            modules.append(module)
    return modules


def create_app(
    data_dir: str | Path,
    *,
    token: str | None = None,
    max_upload_mb: int = 2048,
    web_dir: Path | None = None,
    cache_mb: int = DEFAULT_CACHE_MB,
) -> FastAPI:
    """Build the dashboard application.

    Parameters
    ----------
    data_dir : str or Path
        Archive root; checked now (an unusable folder raises ArchiveError).
    token : str, optional
        When set, every write endpoint needs ``Authorization: Bearer <token>``.
    max_upload_mb : int
        Largest upload accepted, all files together. [MiB]
    web_dir : Path, optional
        Folder of the static pages; the bundled ``web/`` by default.
    cache_mb : int
        Bound on the in-memory chart columns of recent runs; 0 turns the cache off. [MiB]
    """
    if max_upload_mb <= 0:
        raise ArchiveError(f"--max-upload-mb must be a positive number, found {max_upload_mb}.")
    if cache_mb < 0:
        raise ArchiveError(f"The chart cache size must be 0 (off) or more MiB, found {cache_mb}.")
    archive = Archive(Path(data_dir))
    web = Path(web_dir) if web_dir is not None else WEB_DIR
    if not (web / "index.html").is_file():
        raise ArchiveError(f"The dashboard pages were not found in {web} (no index.html).")
    plotly_path = plotly_js_path()
    optional = _load_optional(OPTIONAL_ROUTERS)
    upload_root = Path(tempfile.mkdtemp(prefix="outrigger-upload-"))

    @asynccontextmanager
    async def lifespan(app: FastAPI) -> AsyncIterator[None]:
        yield
        app.state.jobs.shutdown()
        shutil.rmtree(upload_root, ignore_errors=True)

    app = FastAPI(
        title="Outrigger",
        version=__version__,
        description="Runs, events, KPIs and chart series of wheel-legged robot field tests. "
        "Write endpoints need 'Authorization: Bearer <token>' when the server has a token.",
        lifespan=lifespan,
    )
    app.state.archive = archive
    app.state.token = token or None
    app.state.jobs = JobManager()
    app.state.run_cache = RunCache(int(cache_mb) * 1024 * 1024)
    app.state.max_upload_bytes = int(max_upload_mb) * 1024 * 1024
    app.state.upload_root = upload_root
    app.state.features = {
        "token_required": bool(token),
        "max_upload_mb": int(max_upload_mb),
        "pages": [m.__name__.rsplit(".", 1)[-1] for m in optional],
    }

    @app.exception_handler(OutriggerError)
    async def outrigger_error(request: Request, exc: OutriggerError) -> JSONResponse:
        headers = {"WWW-Authenticate": "Bearer"} if exc.status == 401 else None
        return JSONResponse(
            error_body(type(exc).__name__, str(exc)), status_code=exc.status, headers=headers
        )

    @app.exception_handler(StarletteHTTPException)
    async def http_error(request: Request, exc: StarletteHTTPException) -> JSONResponse:
        message = str(exc.detail) if exc.status_code != 404 else f"Nothing at {request.url.path}."
        return JSONResponse(error_body("HTTPError", message), status_code=exc.status_code)

    @app.exception_handler(RequestValidationError)
    async def validation_error(request: Request, exc: RequestValidationError) -> JSONResponse:
        parts = [validation_part(err) for err in exc.errors()]
        return JSONResponse(
            error_body(
                "RequestError",
                "Bad request: " + "; ".join(parts) + ". Fix it and send the request again "
                "(the API reference page, /api.html, lists every parameter).",
            ),
            status_code=400,
        )

    @app.exception_handler(Exception)
    async def internal_error(request: Request, exc: Exception) -> JSONResponse:
        log.exception("internal error on %s %s", request.method, request.url.path)
        return JSONResponse(
            error_body(
                "InternalError",
                "The server hit an internal error and carried on; nothing was changed. "
                "The server log has the details.",
            ),
            status_code=500,
        )

    for module in (*ROUTERS, *optional):
        app.include_router(module.router)

    @app.get(PLOTLY_URL, include_in_schema=False)
    def plotly_js() -> FileResponse:
        return FileResponse(
            plotly_path,
            media_type="text/javascript",
            headers={"Cache-Control": "public, max-age=86400"},
        )

    app.mount("/", StaticFiles(directory=web, html=True), name="web")
    return app
