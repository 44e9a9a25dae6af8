"""Chart data: the timeline plan of a run and its series over a window, downsampled.

The whole run (no ``t0``, no ``t1``: the page's first draw) is reduced from the
run's stored chart overview (:mod:`analysis.overview`: each of 4096 time
buckets keeps its min and max sample, gaps kept as breaks), so it is as fast
with the server's cache cold as warm; the cache then loads the run's columns in
the background for the zooms. Windows are served from
:class:`server.run_cache.RunCache` (the run's chart columns as arrays, so a zoom
slices instead of reading Parquet); a run too large for the cache (found from its
row count before any read, :meth:`RunCache.fits`), or a server started without one,
reads the window from the archive, where the window's time bounds prune the row
groups (a 10 s zoom decodes one or two of the stream's row groups, not the column). Values and units are those shown on the page (angles in degrees, from
``analysis.display``) unless ``units=si`` asks for the stored SI values.
"""

from __future__ import annotations

import math
from functools import partial
from typing import Annotated, Any, Literal

import numpy as np
from fastapi import APIRouter, Depends, Query
from fastapi.responses import JSONResponse

from analysis import catalogue as cat
from analysis.archive.store import Archive
from analysis.detect.pipeline import load_analysis
from analysis.display import to_display
from analysis.overview import OVERVIEW_BUCKETS, RunOverview
from server.charts import chart_plan, unit_of
from server.deps import ApiError, get_archive, get_run_cache
from server.downsample import (
    MAX_POINTS,
    MIN_POINTS,
    MINMAX_RATIO,
    Reduced,
    TimeBase,
    json_times,
    json_values,
    reduce_overview,
    reduce_series,
    time_base,
)
from server.run_cache import DERIVED, FRAME, RunCache

router = APIRouter(prefix="/api/runs", tags=["series"])

ArchiveDep = Annotated[Archive, Depends(get_archive)]
CacheDep = Annotated[RunCache, Depends(get_run_cache)]

#: Point budget per signal when the request names none.
DEFAULT_POINTS = 2000


def overview_max_points(buckets: int) -> int:
    """Largest whole-run budget served from an overview of ``buckets`` time buckets.

    Up to it the overview holds at least as many points (two per bucket) as
    MinMaxLTTB's own min/max preselection of the raw samples would
    (``MINMAX_RATIO`` per output point); larger budgets read the raw samples.
    """
    return 2 * buckets // MINMAX_RATIO


#: Unit systems of the series endpoint.
Units = Literal["display", "si"]
UNITS_DISPLAY: Units = "display"
UNITS_SI: Units = "si"


def available_columns(archive: Archive, run_id: str) -> tuple[list[str], list[str]]:
    """Names of the run's frame columns and of its derived series (without ``t``)."""
    raw = [c for c in archive.columns(run_id) if c != cat.T]
    derived: list[str] = []
    if archive.read_results(run_id) is not None:
        derived = [c for c in archive.series_columns(run_id) if c != cat.T and c not in raw]
    return raw, derived


@router.get("/{run_id}/charts")
def charts(run_id: str, archive: ArchiveDep, cache: CacheDep) -> dict[str, Any]:
    """The stacked timelines of the Run page: panels, rows, traces (catalogue names),
    limit lines (from the thresholds of the last analysis), event kinds shaded.

    Units are those the page shows (``"units": "display"``): each trace gives its
    shown ``unit`` and stored ``si_unit``; limit lines are in the shown unit."""
    raw, derived = cache.signal_names(archive, run_id)
    analysis = load_analysis(archive, run_id)
    skipped = {s["detector"]: s["reason"] for s in (analysis or {}).get("skipped", [])}
    thresholds = (analysis or {}).get("thresholds")
    panels = chart_plan(archive.load_profile(run_id), set(raw) | set(derived), thresholds, skipped)
    return {
        "run_id": run_id,
        "units": UNITS_DISPLAY,
        "panels": panels,
        "signals": {"frame": raw, "derived": derived},
    }


def _window_from_archive(
    archive: Archive, run_id: str, source: str, names: list[str], t0: float | None, t1: float | None
) -> tuple[np.ndarray, dict[str, np.ndarray], TimeBase]:
    """The window read from Parquet (no cache): times, values, gaps."""
    if source == FRAME:
        frame = archive.load_frame(run_id, columns=names, t0=t0, t1=t1)
    else:
        frame = archive.read_result_series(run_id, columns=names, t0=t0, t1=t1)
    t = frame[cat.T].to_numpy(dtype=np.float64)
    values = {
        n: frame[n].to_numpy(dtype=np.float64, na_value=np.nan)
        for n in frame.columns
        if n != cat.T and n in names
    }
    return t, values, time_base(t)


def _window_from_cache(
    cache: RunCache,
    archive: Archive,
    run_id: str,
    source: str,
    names: list[str],
    t0: float | None,
    t1: float | None,
) -> tuple[np.ndarray, dict[str, np.ndarray], TimeBase]:
    """The window sliced from the cached whole-run arrays (both ends inclusive)."""
    cols = cache.columns(archive, run_id, source, names)
    i0 = 0 if t0 is None else int(np.searchsorted(cols.t, t0, side="left"))
    i1 = cols.t.size if t1 is None else int(np.searchsorted(cols.t, t1, side="right"))
    i1 = max(i0, i1)
    values = {n: v[i0:i1] for n, v in cols.values.items()}
    return cols.t[i0:i1], values, cols.base.window(i0, i1)


def _bounds(t: np.ndarray, t0: float | None, t1: float | None) -> tuple[float, float]:
    lo = float(t[0]) if t0 is None and t.size else (t0 or 0.0)
    hi = float(t[-1]) if t1 is None and t.size else (t1 if t1 is not None else lo)
    return lo, hi


def _signal_json(reduced: Reduced, name: str, units: str) -> dict[str, Any]:
    si_unit = unit_of(name)
    if units == UNITS_SI:
        shown, unit = reduced.y, si_unit
    else:
        shown, unit = to_display(reduced.y, si_unit)
    return {
        "t": json_times(reduced.t),
        "y": json_values(shown),
        "unit": unit,
        "samples": reduced.n_samples,
        "downsampled": reduced.downsampled,
    }


def _from_overview(
    stored: RunOverview, names: list[str], points: int, units: str
) -> tuple[dict[str, Any], tuple[float, float] | None, dict[str, list[str]]]:
    """The whole-run series of ``names`` held by the overview, their bounds and sources."""
    out: dict[str, Any] = {}
    by_source: dict[str, list[str]] = {}
    for name in names:
        sig = stored.signals[name]
        by_source.setdefault(sig.source, []).append(name)
        out[name] = _signal_json(reduce_overview(sig.t, sig.y, sig.samples, points), name, units)
    # As for a read: the bounds of the frame when a frame column is asked, else the series'.
    first = FRAME if FRAME in by_source else DERIVED
    return out, stored.spans.get(first), by_source


@router.get("/{run_id}/series")
def series(
    run_id: str,
    archive: ArchiveDep,
    cache: CacheDep,
    signals: Annotated[str, Query(description="comma-separated signal names")],
    t0: Annotated[float | None, Query(description="window start [s]")] = None,
    t1: Annotated[float | None, Query(description="window end [s]")] = None,
    points: Annotated[int, Query(description="point budget per signal")] = DEFAULT_POINTS,
    units: Annotated[
        Units,
        Query(description="'display': angles in deg and deg/s as the page shows them; 'si'"),
    ] = UNITS_DISPLAY,
) -> JSONResponse:
    """Series of chosen signals (frame columns or derived series) over ``[t0, t1]``.

    Each signal is reduced to ``points`` with MinMaxLTTB (spikes survive); a window
    holding fewer samples than the budget comes back at full resolution. Data gaps
    are null values, so charts break the line there. Each signal gives its ``unit``.
    The whole run (no ``t0``/``t1``, ``points`` up to 2048) is reduced from the run's
    stored overview (each of 4096 time buckets keeps its min and max sample), so
    every extreme of the run is there; a run without a current overview is reduced
    from its samples while the overview is built in the background.
    """
    names = [s.strip() for s in signals.split(",") if s.strip()]
    if not names:
        raise ApiError("Name at least one signal: ?signals=roll,pitch")
    for label, value in (("t0", t0), ("t1", t1)):
        if value is not None and not math.isfinite(value):
            raise ApiError(
                f"{label} must be a finite time in seconds since the run's first sample, "
                f"found {value}. Give a number such as {label}=12.5, or leave it out."
            )
    if not MIN_POINTS <= points <= MAX_POINTS:
        raise ApiError(f"points must be between {MIN_POINTS} and {MAX_POINTS}, found {points}.")
    if t0 is not None and t1 is not None and not t1 > t0:
        raise ApiError(f"The window end t1 must be after its start t0, found t0={t0}, t1={t1}.")
    out: dict[str, Any] = {}
    bounds: tuple[float, float] | None = None
    stored = None
    whole = t0 is None and t1 is None and points <= overview_max_points(OVERVIEW_BUCKETS)
    if whole:
        # A run stored before overviews existed is read as before this once, and its
        # overview is built in the background (building it here took seconds), unless
        # that read would be too large (RunCache.overview_now_if_large).
        stored = cache.stored_overview(archive, run_id)
        if stored is None:  # a long run: not every column whole, but its overview first
            stored = cache.overview_now_if_large(archive, run_id, len(set(names)))
    if stored is not None and points <= overview_max_points(stored.buckets):
        held = [n for n in dict.fromkeys(names) if n in stored.signals]
        out, bounds, by_source = _from_overview(stored, held, points, units)
        cache.warm_later(archive, run_id, by_source)  # for the first zoom
    rest = [n for n in names if n not in out]
    if rest:
        read_bounds = _add_read(archive, cache, run_id, rest, t0, t1, points, units, out)
        bounds = bounds or read_bounds
    if whole and stored is None:
        # After this request's own read: the two would share the cores.
        cache.build_overview_later(archive, run_id)
    lo, hi = bounds if bounds is not None else _bounds(np.empty(0), t0, t1)
    body = {
        "run_id": run_id,
        "t0": lo,
        "t1": hi,
        "points": points,
        "units": units,
        "signals": {n: out[n] for n in names if n in out},
    }
    # Built here rather than by FastAPI's generic encoder, which walks every number.
    return JSONResponse(body)


def _add_read(
    archive: Archive,
    cache: RunCache,
    run_id: str,
    names: list[str],
    t0: float | None,
    t1: float | None,
    points: int,
    units: str,
    out: dict[str, Any],
) -> tuple[float, float] | None:
    """Series of ``names`` over a window read from the cache or the archive, into ``out``;
    return the window's bounds."""
    use_cache = cache.usable(archive, run_id)
    if use_cache:
        raw, derived = cache.signal_names(archive, run_id)
    else:
        raw, derived = available_columns(archive, run_id)
    unknown = [n for n in names if n not in raw and n not in derived]
    if unknown:
        raise ApiError(
            f"Run {run_id} has no signal {', '.join(unknown)}. "
            f"Signals: {', '.join(raw)}. Derived series: {', '.join(derived) or 'none (not analysed)'}."
        )
    want = {FRAME: [n for n in names if n in raw], DERIVED: [n for n in names if n not in raw]}
    if not want[DERIVED]:
        del want[DERIVED]
    elif not want[FRAME]:
        del want[FRAME]
    # A run too large for the cache (judged from its row count, nothing read) is served
    # window by window from the archive: the time bounds prune its row groups.
    use_cache = use_cache and cache.fits(archive, run_id, want)
    bounds: tuple[float, float] | None = None
    for source, wanted in want.items():
        if use_cache:
            t, values, base = _window_from_cache(cache, archive, run_id, source, wanted, t0, t1)
        else:
            t, values, base = _window_from_archive(archive, run_id, source, wanted, t0, t1)
        bounds = bounds or _bounds(t, t0, t1)
        for name, y in values.items():
            if use_cache and t0 is None and t1 is None:  # the first draw: same every time
                reduced = cache.overview(
                    archive,
                    run_id,
                    (source, name, points),
                    partial(reduce_series, t, y, points, base),
                )
            else:
                reduced = reduce_series(t, y, points, base)
            out[name] = _signal_json(reduced, name, units)
    return bounds
