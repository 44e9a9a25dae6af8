"""The pictures of one run: course map, actuator envelope, calibration check.

Each route reads one stored run through an ``analysis.detect.pictures`` function
and returns its JSON; the Run page draws them (``web/js/pictures.js``).
"""

from __future__ import annotations

from typing import Annotated, Any

from fastapi import APIRouter, Depends, Query

from analysis.archive.store import Archive
from analysis.detect import pictures
from server.deps import get_archive

router = APIRouter(prefix="/api/runs", tags=["pictures"])

ArchiveDep = Annotated[Archive, Depends(get_archive)]


@router.get("/{run_id}/course-map")
def course_map(
    run_id: str,
    archive: ArchiveDep,
    colour: Annotated[
        str, Query(description="colour series: " + ", ".join(pictures.MAP_COLOURS))
    ] = "tip_margin",
) -> dict[str, Any]:
    """The run's dead-reckoned path (x, y in m), coloured by a series, with its events."""
    return pictures.course_map(archive, run_id, colour)


@router.get("/{run_id}/envelope")
def envelope(
    run_id: str,
    archive: ArchiveDep,
    actuator: Annotated[
        str | None, Query(description="actuator name; first wheel if left out")
    ] = None,
    t0: Annotated[float | None, Query(description="window start [s]")] = None,
    t1: Annotated[float | None, Query(description="window end [s]")] = None,
) -> dict[str, Any]:
    """Operating points of one actuator (torque against joint speed) as a density, with its limits."""
    return pictures.envelope(archive, run_id, actuator, t0, t1)


@router.get("/{run_id}/calibration")
def calibration(run_id: str, archive: ArchiveDep) -> dict[str, Any]:
    """Wheel radius, track width, gyro bias and accelerometer tilt estimated from the run."""
    return pictures.calibration(archive, run_id)
