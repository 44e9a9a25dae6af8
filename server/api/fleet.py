"""Fleet trends: a KPI per run against date, grouped by controller version (the Fleet page)."""

from __future__ import annotations

from typing import Annotated, Any

from fastapi import APIRouter, Depends, Query

from analysis.archive.store import Archive
from analysis.archive.trends import TREND_KPIS, fleet_trends
from server.deps import get_archive

router = APIRouter(prefix="/api/fleet", tags=["fleet"])

ArchiveDep = Annotated[Archive, Depends(get_archive)]


@router.get("/trends")
def trends(
    archive: ArchiveDep,
    kpi: Annotated[str, Query(description="one of: " + ", ".join(TREND_KPIS))] = "min_tip_margin",
    course: Annotated[str | None, Query(description="only runs of this course")] = None,
    tag: Annotated[str | None, Query(description="only runs with this tag")] = None,
) -> dict[str, Any]:
    """One KPI per analysed run against its date, with each version's median and quartiles."""
    return fleet_trends(archive, kpi, course=course, tag=tag)
