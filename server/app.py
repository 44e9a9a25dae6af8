"""The dashboard's web application: a thin FastAPI layer over ``analysis/``.

:func:`create_app` checks the archive folder, includes one APIRouter module per
concern (runs, series, upload, jobs, configs), any optional router that is
installed (the comparison page), serves plotly.js from the installed plotly
package, and serves the static pages of ``web/``. One error shape everywhere:
RFC 9457 problem details (``application/problem+json`` with ``type``, ``title``,
``status``, ``detail``; :mod:`server.problems`).
"""

from __future__ import annotations

import importlib
import logging
import os
import shutil
import tempfile
from collections.abc import AsyncIterator, Collection, Mapping
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

from analysis.archive.objstore import open_archive
from analysis.errors import ArchiveError, OutriggerError
from analysis.resources import package_version, web_folder
from server.api import configs as routes_configs
from server.api import export as routes_export
from server.api import fleet as routes_fleet
from server.api import jobs as routes_jobs
from server.api import meta as routes_meta
from server.api import pictures as routes_pictures
from server.api import runs as routes_runs
from server.api import series as routes_series
from server.api import upload as routes_upload
from server.jobs import JobManager, submit_pending_analysis
from server.problems import PROBLEM_JSON, problem
from server.run_cache import DEFAULT_CACHE_MB, RunCache
from server.security import (
    SecurityMiddleware,
    content_security_policy,
    page_script_hashes,
    scrub_paths,
)

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


def error_response(
    request: Request,
    kind: str,
    status: int,
    message: str,
    headers: Mapping[str, str] | None = None,
) -> JSONResponse:
    """The one error shape the pages show as-is: RFC 9457 problem details."""
    scrub = getattr(request.app.state, "scrub", None)
    detail = scrub(message) if scrub is not None else message
    return JSONResponse(
        problem(kind, status, detail, request.url.path),
        status_code=status,
        media_type=PROBLEM_JSON,
        headers=dict(headers) if headers else None,
    )


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
    allowed_hosts: Collection[str] | None = None,
    analyse_pending: bool = False,
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
    allowed_hosts : collection of str, optional
        Host names answered (``Host`` header); any other gets 400. ``outrigger serve``
        passes :func:`server.security.served_hosts`; None (an app built in-process,
        e.g. by tests) answers any. Writes from another site's page (``Origin``) are
        refused either way, and every answer carries the security headers.
    analyse_pending : bool
        On start, analyse (as one background job) every stored run without results,
        e.g. one whose ingest was interrupted before its analysis.
    """
    if max_upload_mb <= 0:
        raise ArchiveError(f"--max-upload-mb must be a positive number, found {max_upload_mb}.")
    if cache_mb < 0:
        raise ArchiveError(f"The chart cache size must be 0 (off) or more MiB, found {cache_mb}.")
    archive = open_archive(data_dir)
    web = Path(web_dir) if web_dir is not None else web_folder()
    if not (web / "index.html").is_file():
        raise ArchiveError(f"The dashboard pages were not found in {web} (no index.html).")
    plotly_path = plotly_js_path()
    optional = _load_optional(OPTIONAL_ROUTERS)
    # Under the archive's staging folder, named after this process: a server killed
    # mid-upload leaves it there, and the next Archive opened on this folder removes it.
    if archive.is_local:
        upload_root = Path(
            tempfile.mkdtemp(prefix=f"{os.getpid()}-upload-", dir=archive.root / "staging")
        )
    else:  # object store: a local staging folder, likewise removed once its process is gone
        upload_root = archive.new_staging()

    @asynccontextmanager
    async def lifespan(app: FastAPI) -> AsyncIterator[None]:
        if analyse_pending:
            submit_pending_analysis(app.state.jobs, archive)
        yield
        app.state.jobs.shutdown()
        shutil.rmtree(upload_root, ignore_errors=True)

    app = FastAPI(
        title="Outrigger",
        version=package_version(),
        description="Runs, events, KPIs and chart series of wheel-legged robot field tests. "
        "Write endpoints need 'Authorization: Bearer <token>' when the server has a token.",
        lifespan=lifespan,
    )
    app.state.archive = archive
    app.state.token = token or None
    places = {str(upload_root): "the upload", str(archive.root): "the archive"}
    if archive.is_local:
        places[str(archive.root.resolve())] = "the archive"

    def scrub(message: str) -> str:
        return scrub_paths(message, places)

    #: Takes the server's folders out of messages for the browser (server.security).
    app.state.scrub = scrub
    app.state.jobs = JobManager(scrub=scrub)
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
        return error_response(request, type(exc).__name__, exc.status, str(exc), headers)

    @app.exception_handler(RecursionError)
    async def too_deep(request: Request, exc: RecursionError) -> JSONResponse:
        return error_response(
            request, "RequestError", 400,
            "The request holds data nested too deeply to read (hundreds of levels of "
            "lists or tables inside each other). Send it flat, as the API reference "
            "(/api.html) shows.",
        )  # fmt: skip

    @app.exception_handler(StarletteHTTPException)
    async def http_error(request: Request, exc: StarletteHTTPException) -> JSONResponse:
        if exc.status_code == 404:
            return error_response(request, "NotFound", 404, f"Nothing at {request.url.path}.")
        return error_response(request, "HTTPError", exc.status_code, str(exc.detail))

    @app.exception_handler(RequestValidationError)
    async def validation_error(request: Request, exc: RequestValidationError) -> JSONResponse:
        parts = [validation_part(err) for err in exc.errors()]
        return error_response(
            request, "RequestError", 400,
            "Bad request: " + "; ".join(parts) + ". Fix it and send the request again "
            "(the API reference page, /api.html, lists every parameter).",
        )  # fmt: skip

    @app.exception_handler(Exception)
    async def internal_error(request: Request, exc: Exception) -> JSONResponse:
        log.exception("internal error on %s %s", request.method, request.url.path)
        return error_response(
            request, "InternalError", 500,
            "The server hit an internal error and carried on; nothing was changed. "
            "The server log has the details.",
        )  # fmt: skip

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

    def refusal(kind: str, message: str, status: int) -> JSONResponse:
        return JSONResponse(
            problem(kind, status, message), status_code=status, media_type=PROBLEM_JSON
        )

    app.add_middleware(
        SecurityMiddleware,
        hosts=None if allowed_hosts is None else frozenset(h.lower() for h in allowed_hosts),
        csp=content_security_policy(page_script_hashes(web)),
        error=refusal,
    )
    return app
