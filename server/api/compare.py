"""Compare routes: KPI comparison with intervals, overlay chart data, HTML report, candidates.

Each route validates the query and calls :func:`analysis.compare.compare.compare_archived`;
no arithmetic on signals happens here.
"""

from __future__ import annotations

import re
from typing import Annotated, Any

from fastapi import APIRouter, Depends, Query
from fastapi.responses import HTMLResponse

from analysis.archive.store import Archive
from analysis.compare.compare import compare_archived
from analysis.compare.segments import BLOCK_M
from analysis.compare.view import overlay
from analysis.errors import CompareError
from server.deps import get_archive
from server.report import build_report
from server.security import content_security_policy, script_hashes

router = APIRouter(prefix="/api/compare", tags=["compare"])

ArchiveDep = Annotated[Archive, Depends(get_archive)]
RunIds = Annotated[list[str], Query(description="run id; repeat for a set of runs")]

#: Most runs per version in one request (each is loaded and resampled).
MAX_RUNS = 8


def _check_ids(ids: list[str], which: str) -> list[str]:
    out = [i.strip() for i in ids if i.strip()]
    if not out:
        raise CompareError(f"Give at least one run of version {which} (?{which.lower()}=RUN_ID).")
    if len(out) > MAX_RUNS:
        raise CompareError(
            f"At most {MAX_RUNS} runs per version, found {len(out)} for {which}; "
            f"use the command line for larger sets."
        )
    return out


def _marks(text: str | None) -> list[float] | None:
    if text is None or not text.strip():
        return None
    parts = [p for p in re.split(r"[,\s]+", text.strip()) if p]
    try:
        return [float(p) for p in parts]
    except ValueError as exc:
        raise CompareError(
            f"marks must be metres separated by commas, such as 12.5,40,75; found {text!r}."
        ) from exc


def _run(
    archive: Archive, a: list[str], b: list[str], marks: str | None, seed: int, n_boot: int
) -> tuple[Any, Any, Any]:
    if not 100 <= n_boot <= 10000:
        raise CompareError(f"n_boot must be between 100 and 10000, found {n_boot}.")
    return compare_archived(
        archive, _check_ids(a, "A"), _check_ids(b, "B"), marks_m=_marks(marks),
        block_m=BLOCK_M, n_boot=n_boot, seed=seed,
    )  # fmt: skip


@router.get("")
def compare(
    archive: ArchiveDep,
    a: RunIds,
    b: RunIds,
    marks: Annotated[
        str | None, Query(description="segment boundaries [m], comma-separated")
    ] = None,
    seed: int = 0,
    n_boot: int = 2000,
) -> dict[str, Any]:
    """Compare runs of version A with runs of version B on one course.

    Returns ``comparison`` (alignment, segments, KPI rows overall and per
    segment with B - A, 95% interval and verdict) and ``charts`` (overlay traces
    of both versions against course position, events, segment boundaries)."""
    comp, runs_a, runs_b = _run(archive, a, b, marks, seed, n_boot)
    return {"comparison": comp.to_dict(), "charts": overlay(comp, runs_a, runs_b)}


@router.get("/report", response_class=HTMLResponse)
def report(
    archive: ArchiveDep,
    a: RunIds,
    b: RunIds,
    marks: str | None = None,
    seed: int = 0,
    n_boot: int = 2000,
) -> HTMLResponse:
    """The comparison as one self-contained HTML file (plotly.js inline), as a download."""
    comp, runs_a, runs_b = _run(archive, a, b, marks, seed, n_boot)
    text = build_report(comp, overlay(comp, runs_a, runs_b))
    name = re.sub(r"[^A-Za-z0-9_.-]+", "-", f"compare-{'_'.join(a)}-vs-{'_'.join(b)}")[:120]
    return HTMLResponse(
        text,
        headers={
            "Content-Disposition": f'attachment; filename="{name}.html"',
            # its inline scripts (plotly.js, the charts) by hash; nothing else inline runs
            "Content-Security-Policy": content_security_policy(script_hashes(text)),
        },
    )


@router.get("/candidates")
def candidates(archive: ArchiveDep, run: str) -> dict[str, Any]:
    """Runs to compare with ``run``: those of the same course first, then the others."""
    meta = archive.get_meta(run)
    course = meta.get("course")
    rows = [r for r in archive.list_runs() if r.get("run_id") != run]
    same = [r for r in rows if course and r.get("course") == course]
    other = [r for r in rows if not (course and r.get("course") == course)]
    keep = ("run_id", "name", "course", "controller", "date")
    return {
        "run": run,
        "course": course,
        "same_course": [{k: r.get(k) for k in keep} for r in same],
        "other": [{k: r.get(k) for k in keep} for r in other],
    }
