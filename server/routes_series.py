"""Chart data: the timeline plan of a run and its series over a window, downsampled."""

from __future__ import annotations

from typing import Annotated, Any

import numpy as np
import pandas as pd
from fastapi import APIRouter, Depends, Query

from analysis import catalogue as cat
from analysis.archive import Archive
from analysis.pipeline import load_analysis
from server.charts import chart_plan, unit_of
from server.deps import ApiError, get_archive
from server.downsample import (
    MAX_POINTS,
    MIN_POINTS,
    json_times,
    json_values,
    reduce_series,
    time_base,
)

router = APIRouter(prefix="/api/runs", tags=["series"])

ArchiveDep = Annotated[Archive, Depends(get_archive)]

#: Point budget per signal when the request names none.
DEFAULT_POINTS = 2000


def available_columns(archive: Archive, run_id: str) -> tuple[list[str], list[str]]:
    """Names of the run's frame columns and of its derived series (without ``t``)."""
    raw = [c for c in archive.columns(run_id) if c != cat.T]
    derived: list[str] = []
    if archive.read_results(run_id) is not None:
        # An empty window (t < 0 never occurs): the Parquet statistics skip every row group.
        series = archive.read_result_series(run_id, t0=-1.0, t1=-1.0)
        derived = [c for c in series.columns if c != cat.T and c not in raw]
    return raw, derived


@router.get("/{run_id}/charts")
def charts(run_id: str, archive: ArchiveDep) -> dict[str, Any]:
    """The stacked timelines of the Run page: panels, rows, traces (catalogue names),
    limit lines (SI, from the thresholds of the last analysis), event kinds shaded."""
    raw, derived = available_columns(archive, run_id)
    analysis = load_analysis(archive, run_id)
    skipped = {s["detector"]: s["reason"] for s in (analysis or {}).get("skipped", [])}
    thresholds = (analysis or {}).get("thresholds")
    panels = chart_plan(archive.load_profile(run_id), set(raw) | set(derived), thresholds, skipped)
    return {"run_id": run_id, "panels": panels, "signals": {"frame": raw, "derived": derived}}


def _window(frame: pd.DataFrame, t0: float | None, t1: float | None) -> tuple[float, float]:
    t = frame[cat.T].to_numpy(dtype=float)
    lo = float(t[0]) if t0 is None and t.size else (t0 or 0.0)
    hi = float(t[-1]) if t1 is None and t.size else (t1 if t1 is not None else lo)
    return lo, hi


@router.get("/{run_id}/series")
def series(
    run_id: str,
    archive: ArchiveDep,
    signals: Annotated[str, Query(description="comma-separated signal names")],
    t0: Annotated[float | None, Query(description="window start [s]")] = None,
    t1: Annotated[float | None, Query(description="window end [s]")] = None,
    points: Annotated[int, Query(description="point budget per signal")] = DEFAULT_POINTS,
) -> dict[str, Any]:
    """Series of chosen signals (frame columns or derived series) over ``[t0, t1]``.

    Each signal is reduced to ``points`` with MinMaxLTTB (spikes survive); a window
    holding fewer samples than the budget comes back at full resolution. Data gaps
    are null values, so charts break the line there.
    """
    names = [s.strip() for s in signals.split(",") if s.strip()]
    if not names:
        raise ApiError("Name at least one signal: ?signals=roll,pitch")
    if not MIN_POINTS <= points <= MAX_POINTS:
        raise ApiError(f"points must be between {MIN_POINTS} and {MAX_POINTS}, found {points}.")
    if t0 is not None and t1 is not None and not t1 > t0:
        raise ApiError(f"The window end t1 must be after its start t0, found t0={t0}, t1={t1}.")
    raw, derived = available_columns(archive, run_id)
    unknown = [n for n in names if n not in raw and n not in derived]
    if unknown:
        raise ApiError(
            f"Run {run_id} has no signal {', '.join(unknown)}. "
            f"Signals: {', '.join(raw)}. Derived series: {', '.join(derived) or 'none (not analysed)'}."
        )
    want_raw = [n for n in names if n in raw]
    want_derived = [n for n in names if n not in raw]
    frames = []
    if want_raw or not want_derived:
        frames.append(archive.load_frame(run_id, columns=want_raw, t0=t0, t1=t1))
    if want_derived:
        frames.append(archive.read_result_series(run_id, columns=want_derived, t0=t0, t1=t1))
    lo, hi = _window(frames[0], t0, t1)
    out: dict[str, Any] = {}
    for frame in frames:
        t = frame[cat.T].to_numpy(dtype=np.float64)
        base = time_base(t)  # data gaps found once per time axis
        for name in frame.columns:
            if name == cat.T or name not in names:
                continue
            values = frame[name].to_numpy(dtype=np.float64, na_value=np.nan)
            reduced = reduce_series(t, values, points, base)
            out[name] = {
                "t": json_times(reduced.t),
                "y": json_values(reduced.y),
                "unit": unit_of(name),
                "samples": reduced.n_samples,
                "downsampled": reduced.downsampled,
            }
    return {
        "run_id": run_id,
        "t0": lo,
        "t1": hi,
        "points": points,
        "signals": {n: out[n] for n in names if n in out},
    }
