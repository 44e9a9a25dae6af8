"""Fleet tables: the events and KPIs of every run as one partitioned Parquet dataset.

Next to the run folders, the archive keeps ``fleet/events/`` and ``fleet/kpis/``,
each hive-partitioned by run (``run_id=<id>/part-0.parquet``), so that any SQL
engine that reads Parquet datasets (DuckDB locally, for instance
``SELECT * FROM read_parquet('outrigger-data/fleet/events/*/*.parquet',
hive_partitioning = true)``) or ``pyarrow.dataset`` can query across all runs
without opening each run folder. The run folders stay the truth: these tables
are rewritten whenever a run is analysed and removed with the run.
"""

from __future__ import annotations

import os
import secrets
import shutil
from collections.abc import Mapping
from pathlib import Path
from typing import Any

import pandas as pd
import pyarrow as pa
import pyarrow.dataset as ds
import pyarrow.parquet as pq

FLEET_DIR = "fleet"
TABLES = ("events", "kpis")

#: Run metadata copied into every fleet row, so fleet queries can filter on it.
RUN_COLUMNS = ("course", "controller", "date")


def flatten_kpis(kpis: Mapping[str, Any]) -> list[dict[str, Any]]:
    """KPIs nested by detector (and channel) -> rows of (detector, channel, kpi, value).

    Only numeric and boolean KPIs become rows; text KPIs (methods, sides) stay in
    the run's own summary.
    """
    rows: list[dict[str, Any]] = []

    def add(detector: str, channel: str | None, key: str, value: Any) -> None:
        if isinstance(value, bool):
            value = float(value)
        if isinstance(value, int | float):
            rows.append({"detector": detector, "channel": channel, "kpi": key, "value": value})

    for detector, table in kpis.items():
        if not isinstance(table, Mapping):
            continue
        for key, value in table.items():
            if isinstance(value, Mapping):
                for sub, v in value.items():
                    add(detector, key, sub, v)
            else:
                add(detector, None, key, value)
    return rows


def _partition(root: Path, table: str, run_id: str) -> Path:
    return root / FLEET_DIR / table / f"run_id={run_id}"


def _write_atomic(frame: pd.DataFrame, folder: Path) -> None:
    """Replace ``folder/part-0.parquet`` by a new file, via a temporary name."""
    folder.mkdir(parents=True, exist_ok=True)
    tmp = folder / f".part-0.{secrets.token_hex(4)}.tmp"
    pq.write_table(pa.Table.from_pandas(frame, preserve_index=False), tmp, compression="zstd")
    os.replace(tmp, folder / "part-0.parquet")


def write_fleet_rows(
    root: str | os.PathLike[str],
    run_id: str,
    meta: Mapping[str, Any],
    events: pd.DataFrame,
    kpis: Mapping[str, Any],
) -> None:
    """Write (or replace) one run's rows of the fleet tables.

    Parameters
    ----------
    root : path
        Archive root.
    run_id : str
        The run.
    meta : mapping
        The run's metadata (course, controller and date, which never change, are copied).
    events : DataFrame
        The run's events table as stored in its results.
    kpis : mapping
        KPIs by detector, as in the analysis summary.
    """
    base = Path(root)
    run_cols = {c: meta.get(c) for c in RUN_COLUMNS}
    ev = events.copy()
    for c, v in run_cols.items():
        ev[c] = pd.Series([v] * len(ev), dtype="string")
    kp = pd.DataFrame(flatten_kpis(kpis), columns=["detector", "channel", "kpi", "value"])
    kp["value"] = kp["value"].astype(float)
    for c, v in run_cols.items():
        kp[c] = pd.Series([v] * len(kp), dtype="string")
    _write_atomic(ev, _partition(base, "events", run_id))
    _write_atomic(kp, _partition(base, "kpis", run_id))


def delete_fleet_rows(root: str | os.PathLike[str], run_id: str) -> None:
    """Remove one run's rows from the fleet tables (nothing if it has none)."""
    for table in TABLES:
        shutil.rmtree(_partition(Path(root), table, run_id), ignore_errors=True)


def read_fleet(root: str | os.PathLike[str], table: str) -> pd.DataFrame:
    """Read one fleet table of all runs (column ``run_id`` from the partition names).

    Parameters
    ----------
    table : {"events", "kpis"}
    """
    if table not in TABLES:
        raise ValueError(f"Fleet table must be one of {', '.join(TABLES)}, found {table!r}.")
    folder = Path(root) / FLEET_DIR / table
    files = sorted(folder.glob("run_id=*/part-0.parquet"))
    if not files:
        return pd.DataFrame()
    dataset = ds.dataset(
        [str(f) for f in files],
        format="parquet",
        partitioning="hive",
        partition_base_dir=str(folder),
    )
    return dataset.to_table().to_pandas()
