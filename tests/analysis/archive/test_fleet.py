"""Fleet tables: one partitioned Parquet dataset of every run's events and KPIs."""

from __future__ import annotations

import pandas as pd

from analysis.archive.fleet import delete_fleet_rows, flatten_kpis, read_fleet, write_fleet_rows
from analysis.events import Event, events_frame

KPIS = {
    "saturation": {"wheel_l": {"saturated_share": 0.01, "method": "request"}},
    "tip": {"min_margin": 0.2, "side_of_min": "left"},
    "balance": {"fell": False},
}
META_A = {"course": "gullhaven-loop", "controller": "lean-ctl 1.4", "date": "2026-11-28T09:00:00Z"}
META_B = {"course": "gullhaven-loop", "controller": "lean-ctl 2.0", "date": None}


def _events(n: int) -> pd.DataFrame:
    return events_frame(
        [
            Event("slip", "wheel_r", float(i), float(i) + 0.5, 0.4, {"direction": "spin"})
            for i in range(n)
        ]
    )


def test_flatten_keeps_numbers_and_booleans_only():
    rows = flatten_kpis(KPIS)
    assert {(r["detector"], r["channel"], r["kpi"]) for r in rows} == {
        ("saturation", "wheel_l", "saturated_share"),
        ("tip", None, "min_margin"),
        ("balance", None, "fell"),
    }


def test_write_read_replace_delete(tmp_path):
    write_fleet_rows(tmp_path, "run-a", META_A, _events(2), KPIS)
    write_fleet_rows(tmp_path, "run-b", META_B, _events(3), KPIS)
    events = read_fleet(tmp_path, "events")
    assert sorted(events.groupby("run_id").size().to_dict().items()) == [("run-a", 2), ("run-b", 3)]
    assert set(events["controller"]) == {"lean-ctl 1.4", "lean-ctl 2.0"}
    # A re-analysis replaces the run's rows, it does not append to them.
    write_fleet_rows(tmp_path, "run-a", META_A, _events(1), KPIS)
    assert (read_fleet(tmp_path, "events")["run_id"] == "run-a").sum() == 1
    kpis = read_fleet(tmp_path, "kpis")
    assert len(kpis) == 6
    delete_fleet_rows(tmp_path, "run-a")
    assert set(read_fleet(tmp_path, "events")["run_id"]) == {"run-b"}


def test_empty_archive_reads_empty(tmp_path):
    assert read_fleet(tmp_path, "kpis").empty


def test_duckdb_queries_the_fleet_with_sql(tmp_path):
    # DuckDB, a general-purpose SQL engine from the package registry, as the reference reader.
    import duckdb

    write_fleet_rows(tmp_path, "run-a", META_A, _events(2), KPIS)
    write_fleet_rows(tmp_path, "run-b", META_B, _events(3), KPIS)
    pattern = str(tmp_path / "fleet" / "events" / "*" / "*.parquet")
    rows = duckdb.sql(
        "SELECT controller, count(*) AS n FROM read_parquet(?, hive_partitioning = true) "
        "WHERE kind = 'slip' GROUP BY controller ORDER BY controller",
        params=[pattern],
    ).fetchall()
    assert rows == [("lean-ctl 1.4", 2), ("lean-ctl 2.0", 3)]
