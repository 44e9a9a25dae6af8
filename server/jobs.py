"""Background jobs: ingest and analysis run off the request thread.

A job is a plain callable that receives a ``progress(fraction, message)``
function and returns a run id (or None). Jobs run on a small thread pool; their
status lives in memory (a restart forgets finished jobs, never stored runs).
A job that raises an :class:`~analysis.errors.OutriggerError` fails with that
message; any other exception fails with a generic message, so the page never
shows a traceback (the traceback goes to the server log).
"""

from __future__ import annotations

import logging
import threading
import uuid
from collections.abc import Callable
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass, field
from datetime import UTC, datetime
from typing import TYPE_CHECKING, Any

from analysis.errors import OutriggerError

if TYPE_CHECKING:
    from analysis.archive.store import Archive

log = logging.getLogger("outrigger.jobs")

Progress = Callable[[float, str], None]
JobFunc = Callable[[Progress], str | None]

QUEUED, RUNNING, DONE, FAILED = "queued", "running", "done", "failed"

#: Finished jobs kept in memory; the oldest are forgotten beyond this.
KEEP_FINISHED = 200


@dataclass
class Job:
    """Status of one background job (all fields JSON-serialisable)."""

    id: str
    kind: str
    state: str = QUEUED
    progress: float = 0.0
    message: str = "waiting for a worker"
    run_id: str | None = None
    error: dict[str, str] | None = None
    created_at: str = field(default_factory=lambda: datetime.now(UTC).isoformat(timespec="seconds"))
    finished_at: str | None = None
    info: dict[str, Any] = field(default_factory=dict)

    def to_dict(self) -> dict[str, Any]:
        """JSON shape of ``GET /api/jobs/{id}``."""
        return {
            "id": self.id,
            "kind": self.kind,
            "state": self.state,
            "progress": round(self.progress, 4),
            "message": self.message,
            "run_id": self.run_id,
            "error": self.error,
            "created_at": self.created_at,
            "finished_at": self.finished_at,
            "info": self.info,
        }


class JobManager:
    """Run jobs on a thread pool and keep their status.

    Parameters
    ----------
    workers : int
        Threads; 1 by default so two ingests never compete for the disk and
        the 2-core test machines stay responsive. [-]
    scrub : callable, optional
        Applied to a failed job's message (the server removes its own paths).
    """

    def __init__(self, workers: int = 1, scrub: Callable[[str], str] | None = None) -> None:
        self._scrub = scrub or (lambda message: message)
        self._pool = ThreadPoolExecutor(max_workers=workers, thread_name_prefix="outrigger-job")
        self._jobs: dict[str, Job] = {}
        self._lock = threading.Lock()

    def submit(
        self,
        kind: str,
        func: JobFunc,
        *,
        info: dict[str, Any] | None = None,
        cleanup: Callable[[], None] | None = None,
    ) -> Job:
        """Queue ``func``; ``cleanup`` runs after it whatever happens."""
        job = Job(id=uuid.uuid4().hex[:12], kind=kind, info=dict(info or {}))
        with self._lock:
            self._jobs[job.id] = job
            self._forget_old()
        self._pool.submit(self._run, job, func, cleanup)
        return job

    def get(self, job_id: str) -> Job | None:
        """The job with this id, or None."""
        with self._lock:
            return self._jobs.get(job_id)

    def list(self) -> list[Job]:
        """All known jobs, newest first."""
        with self._lock:
            return sorted(self._jobs.values(), key=lambda j: j.created_at, reverse=True)

    def shutdown(self) -> None:
        """Stop taking jobs; wait for the running one."""
        self._pool.shutdown(wait=True, cancel_futures=True)

    def _update(self, job: Job, **changes: Any) -> None:
        with self._lock:
            for key, value in changes.items():
                setattr(job, key, value)

    def _run(self, job: Job, func: JobFunc, cleanup: Callable[[], None] | None) -> None:
        self._update(job, state=RUNNING, message="started")

        def progress(fraction: float, message: str) -> None:
            self._update(job, progress=max(0.0, min(1.0, float(fraction))), message=str(message))

        try:
            run_id = func(progress)
        except OutriggerError as exc:
            message = self._scrub(str(exc))
            self._finish(job, FAILED, error={"type": type(exc).__name__, "message": message})
        except Exception:
            log.exception("job %s (%s) failed", job.id, job.kind)
            self._finish(
                job,
                FAILED,
                error={
                    "type": "InternalError",
                    "message": "The job stopped on an internal error; nothing half-written "
                    "was kept. The server log has the details.",
                },
            )
        else:
            self._finish(job, DONE, run_id=run_id)
        finally:
            if cleanup is not None:
                try:
                    cleanup()
                except Exception:
                    log.exception("cleanup of job %s failed", job.id)

    def _finish(self, job: Job, state: str, **changes: Any) -> None:
        now = datetime.now(UTC).isoformat(timespec="seconds")
        if state == DONE:
            changes.setdefault("progress", 1.0)
        else:
            changes.setdefault("message", "failed")
        self._update(job, state=state, finished_at=now, **changes)

    def _forget_old(self) -> None:
        finished = [j for j in self._jobs.values() if j.state in (DONE, FAILED)]
        if len(finished) > KEEP_FINISHED:
            finished.sort(key=lambda j: j.created_at)
            for j in finished[: len(finished) - KEEP_FINISHED]:
                del self._jobs[j.id]


def submit_pending_analysis(jobs: JobManager, archive: Archive) -> Job | None:
    """Queue one job that analyses every stored run without results; None if there is none.

    A run is stored before it is analysed, so an ingest cut short in between (a
    killed process, a full disk) leaves a run without results; the server picks
    such runs up when it starts. A run whose analysis fails is logged and skipped.
    """
    pending = [r["run_id"] for r in archive.list_runs() if not r.get("analysed")]
    if not pending:
        return None

    def work(progress: Progress) -> str | None:
        from analysis.detect.pipeline import analyse_run

        for k, run_id in enumerate(pending):
            progress(k / len(pending), f"analysing run {run_id} (stored, not analysed)")
            try:
                analyse_run(archive, run_id)
            except Exception:
                log.exception("analysis of the pending run %s failed", run_id)
        progress(1.0, f"analysed {len(pending)} pending run(s)")
        return None

    return jobs.submit("analyse-pending", work, info={"runs": pending})
