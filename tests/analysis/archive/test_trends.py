"""Fleet trends: values per run from the fleet KPI table, the cache beside it kept current."""

from __future__ import annotations

import math
import shutil

import pandas as pd
import pytest

from analysis.archive.fleet import FLEET_DIR, write_fleet_rows
from analysis.archive.store import Archive
from analysis.archive.trends import CACHE_FILE, TrendError, fleet_trends, headline_values

EMPTY = pd.DataFrame(columns=["kind", "channel", "start_s", "end_s", "duration_s", "peak"])


def _run(archive: Archive, i: int, version: str, tip: float, slips: int, distance_m: float) -> str:
    meta = {
        "name": f"r{i}",
        "course": "gullhaven-loop",
        "controller": version,
        "date": f"2026-0{i + 1}-01T10:00:00Z",
        "distance_m": distance_m,
        "tags": ["wet"] if i % 2 else [],
        "source_hash": f"{i:064x}",
        "ingested_at": "2026-12-01T00:00:00Z",
    }
    run_id = archive.commit_run(archive.new_staging(), meta)
    kpis = {
        "saturation": {
            "wheel_l": {"saturated_share": 0.01 * i},
            "hip_l": {"saturated_share": 0.002},
        },
        "slip": {"wheel_l": {"event_count": slips}, "yaw_slip": {"event_count": 99}},
        "tip": {"min_margin": tip},
    }  # no roll KPIs: that detector did not run
    write_fleet_rows(archive.root, run_id, meta, EMPTY, kpis)
    return run_id


def test_values_units_and_versions(tmp_path) -> None:
    archive = Archive(tmp_path)
    ids = [
        _run(archive, 0, "v1", 0.30, 2, 500.0),
        _run(archive, 1, "v1", 0.50, 4, 2000.0),
        _run(archive, 2, "v2", 0.70, 0, 1000.0),
    ]
    tip = fleet_trends(archive, "min_tip_margin")
    assert [p["value"] for p in tip["points"]] == [0.30, 0.50, 0.70]
    v1 = next(v for v in tip["versions"] if v["version"] == "v1")
    # numpy percentile, linear (Hyndman & Fan type 7): of [0.3, 0.5] the median is 0.4,
    # the quartiles 0.35 and 0.45 (hand-computed).
    assert (v1["n"], v1["median"], v1["q1"], v1["q3"]) == (2, 0.4, 0.35, 0.45)
    slip = fleet_trends(archive, "slip_events_per_km")
    # Wheel slip events only (the 99 yaw-slip events are left out), per km of the run.
    assert [p["value"] for p in slip["points"]] == [4.0, 2.0, 0.0]
    sat = fleet_trends(archive, "worst_saturation_share")
    assert [p["value"] for p in sat["points"]] == pytest.approx([0.2, 1.0, 2.0])  # worst, in %
    roll = fleet_trends(archive, "roll_error_rms")
    assert roll["points"] == [] and roll["not_run"] == 3  # not run is not zero
    assert [p["run_id"] for p in fleet_trends(archive, "min_tip_margin", tag="wet")["points"]] == [
        ids[1]
    ]
    with pytest.raises(TrendError, match="min_tip_margin"):
        fleet_trends(archive, "mood")


def test_the_cache_follows_rewritten_and_deleted_partitions(tmp_path) -> None:
    archive = Archive(tmp_path)
    a = _run(archive, 0, "v1", 0.30, 2, 500.0)
    b = _run(archive, 1, "v1", 0.50, 4, 2000.0)
    assert headline_values(tmp_path).loc[a, "min_tip_margin"] == 0.30
    assert (tmp_path / FLEET_DIR / CACHE_FILE).is_file()
    meta = archive.get_meta(a)
    write_fleet_rows(tmp_path, a, meta, EMPTY, {"tip": {"min_margin": 0.05}})  # re-analysed
    values = headline_values(tmp_path)
    assert values.loc[a, "min_tip_margin"] == 0.05
    assert math.isnan(values.loc[a, "worst_saturation_share"])  # that KPI is gone now
    shutil.rmtree(tmp_path / FLEET_DIR / "kpis" / f"run_id={b}")
    assert list(headline_values(tmp_path).index) == [a]
    (tmp_path / FLEET_DIR / CACHE_FILE).write_bytes(b"not parquet")  # a broken cache is rebuilt
    assert headline_values(tmp_path).loc[a, "min_tip_margin"] == 0.05
