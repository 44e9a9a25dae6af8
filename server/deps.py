"""What every route module shares: the archive, the job manager, the chart cache, the
write guard.

The objects live on ``app.state`` (set by :func:`server.app.create_app`); the
routes reach them through these FastAPI dependencies, so each route module
stays one small concern.
"""

from __future__ import annotations

import hmac
from typing import TYPE_CHECKING

from fastapi import Request

from analysis.errors import OutriggerError

if TYPE_CHECKING:
    from analysis.archive.store import Archive
    from server.jobs import JobManager
    from server.run_cache import RunCache


class ApiError(OutriggerError):
    """A request the server refuses before any analysis code runs (bad name, too large)."""

    def __init__(self, message: str, status: int = 400) -> None:
        super().__init__(message)
        self.status = status


class UnauthorizedError(OutriggerError):
    """A write request without the server's token."""

    status = 401


def get_archive(request: Request) -> Archive:
    """The archive the server was started on."""
    archive: Archive = request.app.state.archive
    return archive


def get_jobs(request: Request) -> JobManager:
    """The background job manager."""
    jobs: JobManager = request.app.state.jobs
    return jobs


def get_run_cache(request: Request) -> RunCache:
    """The in-memory cache of the chart columns of recent runs."""
    cache: RunCache = request.app.state.run_cache
    return cache


def forget_run(request: Request, run_id: str) -> None:
    """Drop a run from the chart cache; every route that changes a run calls this."""
    get_run_cache(request).invalidate(run_id)


def require_write(request: Request) -> None:
    """Refuse a write request without ``Authorization: Bearer <token>`` when a token is set."""
    token: str | None = request.app.state.token
    if not token:
        return
    header = request.headers.get("authorization", "")
    scheme, _, given = header.partition(" ")
    if scheme.lower() != "bearer" or not given:
        raise UnauthorizedError(
            "This server was started with --token: changing runs needs the header "
            "'Authorization: Bearer <token>'. Enter the token in the page's 'write token' field."
        )
    if not hmac.compare_digest(given.strip().encode(), token.encode()):
        raise UnauthorizedError(
            "The write token does not match the one the server was started with. "
            "Check it and enter it again."
        )
