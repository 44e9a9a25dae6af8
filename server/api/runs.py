"""Runs: list, one run, edit, delete, events CSV, Parquet zip, re-analysis."""

from __future__ import annotations

import io
import json
import os
import zipfile
from collections.abc import Iterator, Sequence
from datetime import UTC, datetime, timedelta
from pathlib import Path, PurePosixPath
from typing import Annotated, Any

import pandas as pd
from fastapi import APIRouter, Body, Depends, Query, Request
from fastapi.responses import Response, StreamingResponse
from pydantic import BaseModel, Field

from analysis.archive.location import Location
from analysis.archive.store import Archive
from analysis.detect.limits import not_run
from analysis.detect.pipeline import analyse_run, headline_kpis, load_analysis
from analysis.display import (
    display_detector_kpis,
    display_event_peak,
    display_headline,
    export_value,
)
from analysis.lap_kpis import display_laps
from analysis.profile import Thresholds
from server.deps import ApiError, forget_run, get_archive, get_jobs, require_write
from server.jobs import JobManager, Progress

router = APIRouter(prefix="/api/runs", tags=["runs"])

ArchiveDep = Annotated[Archive, Depends(get_archive)]
JobsDep = Annotated[JobManager, Depends(get_jobs)]

#: First columns of the events CSV, in order; then ``peak [<unit>]`` and ``detail.<key>``.
EVENT_CSV_COLUMNS = ("kind", "channel", "start_utc", "start_s", "end_s", "duration_s")

#: Bytes read per step while streaming the zip.
ZIP_CHUNK = 1 << 20


def _headline(archive: Archive, run_id: str) -> tuple[dict[str, Any] | None, dict[str, str]]:
    """Headline KPIs and, per KPI whose detector was skipped, the reason ("not run")."""
    stored = archive.read_results(run_id)
    if stored is None:
        return None, {}
    _, summary = stored
    return headline_kpis(summary), not_run(summary)["kpis"]


@router.get("")
def list_runs(
    archive: ArchiveDep,
    course: str | None = None,
    controller: str | None = None,
    tag: str | None = None,
    date_from: Annotated[str | None, Query(description="ISO 8601 date, inclusive")] = None,
    date_to: Annotated[str | None, Query(description="ISO 8601 date, inclusive")] = None,
) -> dict[str, Any]:
    """Stored runs, newest first, with their headline KPIs (None when not analysed).

    Dates are ISO 8601 prefixes: ``date_from=2026-11-28`` starts at that day,
    ``date_to=2026-11-28`` takes that whole day."""
    runs = archive.list_runs(
        course=course, controller=controller, tag=tag, date_from=date_from, date_to=date_to
    )
    out = []
    for run in reversed(runs):
        row = dict(run)
        kpis, skipped = _headline(archive, run["run_id"]) if run.get("analysed") else (None, {})
        row["kpis"] = kpis
        row["kpis_shown"] = display_headline(kpis)
        row["kpis_not_run"] = skipped
        out.append(row)
    return {"runs": out, "count": len(out)}


@router.get("/{run_id}")
def get_run(run_id: str, archive: ArchiveDep) -> dict[str, Any]:
    """One run: metadata (with the ingest report), its analysis (KPIs, events, skipped
    detectors, thresholds used) and the headline KPIs; ``not_run`` names, per skipped
    detector, its headline KPIs and event kinds with the reason (shown as "not run").

    Values are SI; ``headline_shown``, ``kpis_shown`` and each event's ``shown``
    give them in the units the page shows (angles in deg, rates in deg/s, shares
    in %; ``analysis.display``)."""
    meta = archive.get_meta(run_id)
    analysis = load_analysis(archive, run_id)
    headline = headline_kpis(analysis) if analysis is not None else None
    if analysis is not None:
        for event in analysis.get("events", []):
            event["shown"] = display_event_peak(event)
    return {
        "run": meta,
        "analysis": analysis,
        "headline": headline,
        "headline_shown": display_headline(headline),
        "laps_shown": display_laps(analysis.get("laps")) if analysis is not None else None,
        "not_run": not_run(analysis) if analysis is not None else None,
        "kpis_shown": display_detector_kpis(analysis.get("kpis", {})) if analysis else None,
    }


class RunEdit(BaseModel):
    """Fields a user may change; absent fields stay as they are."""

    name: str | None = Field(default=None, max_length=200)
    notes: str | None = Field(default=None, max_length=20_000)
    tags: list[str] | None = Field(default=None, max_length=50)


@router.patch("/{run_id}", dependencies=[Depends(require_write)])
def edit_run(run_id: str, edit: RunEdit, archive: ArchiveDep, request: Request) -> dict[str, Any]:
    """Change a run's name, notes or tags; returns the updated metadata."""
    if edit.tags is not None:
        bad = [t for t in edit.tags if not t.strip() or len(t) > 64]
        if bad:
            raise ApiError(
                f"Tags must be 1 to 64 characters, found {bad!r}. Remove empty or long tags."
            )
    archive.update_meta(
        run_id,
        name=edit.name,
        notes=edit.notes,
        tags=[t.strip() for t in edit.tags] if edit.tags is not None else None,
    )
    forget_run(request, run_id)
    return {"run": archive.get_meta(run_id)}


@router.delete("/{run_id}", dependencies=[Depends(require_write)])
def delete_run(
    run_id: str,
    archive: ArchiveDep,
    request: Request,
    confirm: Annotated[str | None, Query(description="repeat the run id to confirm")] = None,
) -> dict[str, Any]:
    """Delete a run and its files; needs ``?confirm=<run_id>``."""
    archive.get_meta(run_id)  # 404 for an unknown run before asking for confirmation
    if confirm != run_id:
        raise ApiError(
            f"Deleting run {run_id} cannot be undone. Repeat its id to confirm: "
            f"DELETE /api/runs/{run_id}?confirm={run_id} (found confirm={confirm!r})."
        )
    archive.delete_run(run_id)
    forget_run(request, run_id)
    return {"deleted": run_id}


def _utc(start: datetime | None, seconds: Any) -> str:
    if start is None or seconds is None:
        return ""
    when = start + timedelta(seconds=float(seconds))
    return when.isoformat(timespec="milliseconds").replace("+00:00", "Z")


def _flat(value: Any) -> Any:
    if isinstance(value, dict | list):
        return json.dumps(value, sort_keys=True)
    return export_value(value)


def events_csv_text(events: list[dict[str, Any]], start: str | None = None) -> str:
    """Events as CSV text: :data:`EVENT_CSV_COLUMNS`, one peak column per unit, flat detail.

    Parameters
    ----------
    events : list of dict
        Stored events (SI).
    start : str, optional
        The run's absolute start, ISO 8601 UTC; gives the ``start_utc`` column (empty
        for a run timed from boot without a date).

    Returns
    -------
    str
        Columns ``kind, channel, start_utc, start_s, end_s, duration_s``, then
        ``peak [<unit>]`` for each SI unit the peaks carry (each event fills the
        column of its unit), then ``detail.<key>`` for every detail key. Numbers
        carry 6 significant digits.
    """
    t0 = None
    if start:
        try:
            t0 = datetime.fromisoformat(str(start).replace("Z", "+00:00")).astimezone(UTC)
        except ValueError:
            t0 = None
    units: list[str] = []
    keys: list[str] = []
    for e in events:
        raw = e.get("detail")
        detail: dict[str, Any] = raw if isinstance(raw, dict) else {}
        unit = str(detail.get("unit", "") or "-")
        if unit not in units:
            units.append(unit)
        keys += [k for k in detail if k != "unit" and k not in keys]
    peak_cols = {u: f"peak [{u}]" for u in units}
    columns = [*EVENT_CSV_COLUMNS, *peak_cols.values(), *(f"detail.{k}" for k in sorted(keys))]
    rows = []
    for e in events:
        raw = e.get("detail")
        detail = raw if isinstance(raw, dict) else {}
        row: dict[str, Any] = {
            "kind": e.get("kind"),
            "channel": e.get("channel") or "",
            "start_utc": _utc(t0, e.get("start_s")),
            "start_s": export_value(e.get("start_s")),
            "end_s": export_value(e.get("end_s")),
            "duration_s": export_value(e.get("duration_s")),
        }
        row[peak_cols[str(detail.get("unit", "") or "-")]] = export_value(e.get("peak"))
        for k, v in detail.items():
            if k != "unit":
                row[f"detail.{k}"] = _flat(v)
        rows.append(row)
    frame = pd.DataFrame(rows, columns=columns)
    return frame.to_csv(index=False, lineterminator="\n")


@router.get("/{run_id}/events.csv", response_class=Response)
def events_csv(run_id: str, archive: ArchiveDep) -> Response:
    """The run's events as a CSV download."""
    archive.get_meta(run_id)
    analysis = load_analysis(archive, run_id)
    if analysis is None:
        raise ApiError(
            f"Run {run_id} has not been analysed yet, so it has no events. "
            "Run the analysis first (Run page, 'Re-analyse').",
            status=409,
        )
    return Response(
        events_csv_text(analysis["events"], archive.get_meta(run_id).get("date")),
        media_type="text/csv; charset=utf-8",
        headers={"Content-Disposition": f'attachment; filename="{run_id}-events.csv"'},
    )


class _Sink(io.RawIOBase):
    """Write-only buffer that zipfile streams into; the generator drains it."""

    def __init__(self) -> None:
        self.parts: list[bytes] = []
        self.position = 0

    def writable(self) -> bool:
        return True

    def write(self, data: Any) -> int:
        chunk = bytes(data)
        self.parts.append(chunk)
        self.position += len(chunk)
        return len(chunk)

    def tell(self) -> int:
        return self.position

    def drain(self) -> bytes:
        out = b"".join(self.parts)
        self.parts.clear()
        return out


def _zip_stream(files: Sequence[Path | Location], run_id: str) -> Iterator[bytes]:
    # Local files or objects of an object-store archive: names relative to the run's folder.
    keys = [PurePosixPath(f.path if isinstance(f, Location) else f.as_posix()) for f in files]
    base = PurePosixPath(os.path.commonpath([k.parent for k in keys])) if keys else None
    sink = _Sink()
    # Parquet is already compressed: store, do not deflate again.
    with zipfile.ZipFile(sink, "w", compression=zipfile.ZIP_STORED) as zf:
        for path, key in zip(files, keys, strict=True):
            arcname = f"{run_id}/{key.relative_to(base or key.parent).as_posix()}"
            with path.open("rb") as src, zf.open(arcname, "w", force_zip64=True) as dst:
                while chunk := src.read(ZIP_CHUNK):
                    dst.write(chunk)
                    yield sink.drain()
    yield sink.drain()


@router.get("/{run_id}/files.zip", response_class=StreamingResponse)
def run_zip(run_id: str, archive: ArchiveDep) -> StreamingResponse:
    """The run's stored files (Parquet, metadata, results) as a streamed zip."""
    files = archive.run_files(run_id)
    return StreamingResponse(
        _zip_stream(files, run_id),
        media_type="application/zip",
        headers={"Content-Disposition": f'attachment; filename="{run_id}.zip"'},
    )


@router.post("/{run_id}/analyse", status_code=202, dependencies=[Depends(require_write)])
def reanalyse(
    run_id: str,
    archive: ArchiveDep,
    jobs: JobsDep,
    request: Request,
    thresholds: Annotated[
        dict[str, Any],
        Body(description='threshold file keys -> numbers, e.g. {"roll_band_deg": 2.0}'),
    ],
) -> dict[str, Any]:
    """Re-run the analysis with edited thresholds (as a background job).

    Keys not given keep the values of the run's last analysis (or the profile's).
    The thresholds are checked now: a bad key or value answers 400 at once.
    """
    archive.get_meta(run_id)
    previous = load_analysis(archive, run_id)
    base = dict(previous["thresholds"]) if previous and previous.get("thresholds") else {}
    merged = {**base, **thresholds}
    checked = Thresholds.from_mapping(merged, where="the edited thresholds")

    def work(progress: Progress) -> str:
        analyse_run(archive, run_id, thresholds=checked, progress=progress)
        forget_run(request, run_id)
        progress(1.0, "analysis stored")
        return run_id

    job = jobs.submit("analyse", work, info={"run_id": run_id})
    return {"job": job.to_dict()}
