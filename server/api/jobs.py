"""Background job status (upload ingest + analysis, re-analysis)."""

from __future__ import annotations

from typing import Annotated, Any

from fastapi import APIRouter, Depends

from server.deps import ApiError, get_jobs
from server.jobs import JobManager

router = APIRouter(prefix="/api/jobs", tags=["jobs"])

JobsDep = Annotated[JobManager, Depends(get_jobs)]


@router.get("")
def list_jobs(jobs: JobsDep) -> dict[str, Any]:
    """Jobs this server process knows, newest first."""
    return {"jobs": [j.to_dict() for j in jobs.list()]}


@router.get("/{job_id}")
def job_status(job_id: str, jobs: JobsDep) -> dict[str, Any]:
    """One job: state (queued, running, done, failed), progress [0..1], message, run id,
    and on failure the error (type and message, as the error shape of every endpoint)."""
    job = jobs.get(job_id)
    if job is None:
        raise ApiError(
            f"No job {job_id!r} on this server. Jobs live in memory: a restarted server "
            "forgets them (stored runs stay; see the Runs page).",
            status=404,
        )
    return {"job": job.to_dict()}
