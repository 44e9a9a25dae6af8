"""Fleet trends: one KPI per run against the run's date, grouped by controller version.

"Is the robot getting better release after release": this reads the fleet KPI
table (``fleet/kpis/``, one small partition per run), keeps each run's headline
values in one cache file beside it (re-reading only partitions that changed),
joins the catalog's run facts (date, version, course, tags, distance) and gives per
run one value and per version its median and quartiles, so thousands of runs stay
fast.
"""

from __future__ import annotations

import contextlib
import os
import secrets
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq

from analysis.archive.fleet import FLEET_DIR
from analysis.archive.store import Archive
from analysis.errors import OutriggerError


@dataclass(frozen=True)
class TrendKpi:
    """A KPI that can be drawn against date: how it is computed from fleet rows."""

    key: str
    label: str
    unit: str  # unit shown (display convention: % for shares, deg for angles)
    better: str  # "lower" or "higher"


TREND_KPIS: dict[str, TrendKpi] = {
    k.key: k
    for k in (
        TrendKpi("worst_saturation_share", "Saturated share, worst actuator", "%", "lower"),
        TrendKpi("slip_events_per_km", "Slip events per km", "1/km", "lower"),
        TrendKpi("min_tip_margin", "Minimum tip-over margin", "", "higher"),
        TrendKpi("roll_error_rms", "Roll error RMS", "deg", "lower"),
    )
}


class TrendError(OutriggerError):
    """A trend was asked for a KPI that does not exist."""

    status = 400


#: Per-run headline values of the trends, kept beside the fleet tables so that a page
#: on thousands of runs reads one file, not one partition per run. Each row holds the
#: modification stamp of the run's KPI partition it came from; a changed, new or
#: deleted partition is noticed by that stamp and only those runs are read again.
CACHE_FILE = "trends-cache.parquet"
_COLUMNS = ("worst_saturation_share", "slip_events", "min_tip_margin", "roll_error_rms")


def _values_of(kp: pd.DataFrame) -> dict[str, float]:
    """The trend values of one run from its KPI rows (NaN where the detector did not run)."""
    det, kpi = kp["detector"].astype(str), kp["kpi"].astype(str)
    chan = kp["channel"].astype(str)
    val = kp["value"].astype(float)

    def pick(mask: pd.Series, how: str) -> float:
        sel = val[mask]
        if sel.empty:
            return float("nan")
        return float(getattr(sel, how)())

    return {
        "worst_saturation_share": pick((det == "saturation") & (kpi == "saturated_share"), "max"),
        "slip_events": pick((det == "slip") & (kpi == "event_count") & (chan != "yaw_slip"), "sum"),
        "min_tip_margin": pick((det == "tip") & (kpi == "min_margin"), "min"),
        "roll_error_rms": pick((det == "roll") & (kpi == "rms"), "max"),
    }


def _partition_stamps(folder: Path) -> dict[str, int]:
    """run_id -> modification time of its KPI partition folder (changes on every rewrite)."""
    stamps: dict[str, int] = {}
    if not folder.is_dir():
        return stamps
    with os.scandir(folder) as entries:
        for entry in entries:
            if entry.is_dir() and entry.name.startswith("run_id="):
                stamps[entry.name.removeprefix("run_id=")] = entry.stat().st_mtime_ns
    return stamps


def headline_values(root: Path) -> pd.DataFrame:
    """Trend values of every run with fleet rows, indexed by run id (SI, shares as [-]).

    Reads the cache file and only the KPI partitions that changed since it was
    written, then rewrites the cache (atomically) when anything changed.
    """
    folder = root / FLEET_DIR / "kpis"
    stamps = _partition_stamps(folder)
    cache_path = root / FLEET_DIR / CACHE_FILE
    cached = pd.DataFrame(columns=["run_id", "stamp", *_COLUMNS])
    if cache_path.is_file():
        with contextlib.suppress(OSError, pa.ArrowInvalid):  # unreadable: rebuilt below
            cached = pq.read_table(cache_path).to_pandas()
    keep = np.array(
        [stamps.get(r) == s for r, s in zip(cached["run_id"], cached["stamp"], strict=True)],
        dtype=bool,
    )
    fresh = cached.loc[keep]
    todo = sorted(set(stamps) - set(fresh["run_id"]))
    rows = []
    for run_id in todo:
        try:
            kp = pq.read_table(
                folder / f"run_id={run_id}" / "part-0.parquet",
                columns=["detector", "channel", "kpi", "value"],
            ).to_pandas()
        except (OSError, pa.ArrowInvalid):
            continue  # being rewritten right now: picked up next time
        rows.append({"run_id": run_id, "stamp": stamps[run_id], **_values_of(kp)})
    table = pd.concat([fresh, pd.DataFrame(rows, columns=fresh.columns)], ignore_index=True)
    if rows or len(fresh) != len(cached):
        tmp = cache_path.with_name(f".{CACHE_FILE}.{secrets.token_hex(4)}.tmp")
        try:
            pq.write_table(pa.Table.from_pandas(table, preserve_index=False), tmp)
            os.replace(tmp, cache_path)
        except OSError:
            tmp.unlink(missing_ok=True)  # a read-only archive still answers, uncached
    return table.set_index("run_id")


def fleet_trends(
    archive: Archive,
    kpi: str,
    *,
    course: str | None = None,
    tag: str | None = None,
) -> dict[str, Any]:
    """One KPI per run against date, grouped by controller version.

    Parameters
    ----------
    archive : Archive
        The run archive (its catalog and fleet tables).
    kpi : str
        One of :data:`TREND_KPIS`.
    course, tag : str, optional
        Only runs of this course / with this tag.

    Returns
    -------
    dict
        ``points``: per analysed run ``run_id``, ``name``, ``date``, ``version``,
        ``value`` (display unit); ``versions``: per controller version ``n``,
        ``median``, ``q1``, ``q3`` (quartiles by linear interpolation, numpy's
        default, Hyndman & Fan 1996 definition 7), first and last date; the KPI's
        label, unit and which direction is better. Runs the detector did not run
        on are left out and counted in ``not_run``.
    """
    if kpi not in TREND_KPIS:
        raise TrendError(f"Unknown trend KPI {kpi!r}; choose one of {', '.join(TREND_KPIS)}.")
    spec = TREND_KPIS[kpi]
    runs = archive.list_runs(course=course, tag=tag)
    column = "slip_events" if kpi == "slip_events_per_km" else kpi
    values = headline_values(Path(archive.root))[column]
    points = []
    not_run = 0
    for r in runs:
        value = values.get(r["run_id"])
        if value is None or not np.isfinite(value):
            not_run += 1
            continue
        v = float(value)
        if kpi == "worst_saturation_share":
            v *= 100.0  # share -> %
        elif kpi == "roll_error_rms":
            v = float(np.rad2deg(v))  # rad -> deg (display convention)
        elif kpi == "slip_events_per_km":
            km = (r.get("distance_m") or 0.0) / 1000.0
            if km <= 0:
                not_run += 1
                continue
            v = v / km
        points.append(
            {
                "run_id": r["run_id"],
                "name": r.get("name"),
                "date": r.get("date"),
                "version": r.get("controller") or "(no version)",
                "value": float(f"{v:.6g}"),
            }
        )
    versions = []
    frame = pd.DataFrame(points)
    if len(frame):
        for version, group in frame.groupby("version", sort=False):
            vals = group["value"].to_numpy(dtype=float)
            q1, med, q3 = np.percentile(vals, [25, 50, 75])
            versions.append(
                {
                    "version": version,
                    "n": len(vals),
                    "median": float(f"{med:.6g}"),
                    "q1": float(f"{q1:.6g}"),
                    "q3": float(f"{q3:.6g}"),
                    "first": str(group["date"].min()),
                    "last": str(group["date"].max()),
                }
            )
        versions.sort(key=lambda v: str(v["first"]))
    return {
        "kpi": kpi,
        "label": spec.label,
        "unit": spec.unit,
        "better": spec.better,
        "kpis": {k: v.label for k, v in TREND_KPIS.items()},
        "course": course,
        "tag": tag,
        "points": points,
        "versions": versions,
        "not_run": not_run,
    }
