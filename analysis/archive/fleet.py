"""Fleet tables: the events and KPIs of every run as one partitioned Parquet dataset.

Next to the run folders, the archive keeps ``fleet/events/`` and ``fleet/kpis/``,
each hive-partitioned by run (``run_id=<id>/part-0.parquet``), so that any SQL
engine that reads Parquet datasets (DuckDB locally, for instance
``SELECT * FROM read_parquet('outrigger-data/fleet/events/*/*.parquet',
hive_partitioning = true)``) or ``pyarrow.dataset`` can query across all runs
without opening each run folder. The run folders stay the truth: these tables
are rewritten whenever a run is analysed and removed with the run. Each
partition carries a stamp of the results it was written from (a hash of the
run's analysis summary, in the Parquet file's key-value metadata), so that
rows left stale by an analysis that stopped between storing its results and
writing its fleet rows are found and rewritten (``analysis.detect.pipeline.sync_fleet``).
"""

from __future__ import annotations

import hashlib
import json
import os
from collections.abc import Mapping
from contextlib import suppress
from typing import Any

import pandas as pd
import pyarrow as pa
import pyarrow.dataset as ds
import pyarrow.fs as pafs

from analysis.archive.location import Location

FLEET_DIR = "fleet"
TABLES = ("events", "kpis")

#: Run metadata copied into every fleet row, so fleet queries can filter on it.
RUN_COLUMNS = ("course", "controller", "date")
#: Key of the results stamp in each partition file's metadata.
STAMP_KEY = b"outrigger.results"


def results_stamp(summary: Mapping[str, Any]) -> str:
    """Stamp of one analysis's results: a hash of its summary (KPIs, thresholds, time...)."""
    text = json.dumps(summary, sort_keys=True, separators=(",", ":"), default=str)
    return hashlib.sha256(text.encode()).hexdigest()[:24]


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


Root = str | os.PathLike[str] | Location


def _partition(root: Root, table: str, run_id: str) -> Location:
    return Location.of(root) / FLEET_DIR / table / f"run_id={run_id}"


def _write_atomic(frame: pd.DataFrame, folder: Location, stamp: str | None) -> None:
    """Replace ``folder/part-0.parquet`` whole (a renamed temporary file, or one upload)."""
    table = pa.Table.from_pandas(frame, preserve_index=False)
    if stamp is not None:
        table = table.replace_schema_metadata(
            {**(table.schema.metadata or {}), STAMP_KEY: stamp.encode()}
        )
    (folder / "part-0.parquet").write_parquet(table)


def fleet_stamp(root: Root, run_id: str) -> str | None:
    """The results stamp both of a run's partitions carry; None if missing or unequal."""
    stamps = set()
    for table in TABLES:
        try:
            meta = (_partition(root, table, run_id) / "part-0.parquet").read_schema().metadata
        except (OSError, pa.ArrowInvalid):
            return None
        stamps.add((meta or {}).get(STAMP_KEY))
    found = stamps.pop() if len(stamps) == 1 else None
    return found.decode() if found else None


def fleet_run_ids(root: Root) -> set[str]:
    """Runs that have rows in any fleet table."""
    ids = set()
    for table in TABLES:
        for info in (Location.of(root) / FLEET_DIR / table).listdir():
            if info.type == pafs.FileType.Directory and info.base_name.startswith("run_id="):
                ids.add(info.base_name.split("=", 1)[1])
    return ids


def write_fleet_rows(
    root: Root,
    run_id: str,
    meta: Mapping[str, Any],
    events: pd.DataFrame,
    kpis: Mapping[str, Any],
    stamp: str | None = None,
) -> None:
    """Write (or replace) one run's rows of the fleet tables.

    Parameters
    ----------
    root : path or Location
        Archive root (a folder, an ``s3://`` URI or a :class:`Location`).
    run_id : str
        The run.
    meta : mapping
        The run's metadata (course, controller and date, which never change, are copied).
    events : DataFrame
        The run's events table as stored in its results.
    kpis : mapping
        KPIs by detector, as in the analysis summary.
    stamp : str, optional
        :func:`results_stamp` of the summary these rows come from.
    """
    run_cols = {c: meta.get(c) for c in RUN_COLUMNS}
    ev = events.copy()
    for c, v in run_cols.items():
        ev[c] = pd.Series([v] * len(ev), dtype="string")
    kp = pd.DataFrame(flatten_kpis(kpis), columns=["detector", "channel", "kpi", "value"])
    kp["value"] = kp["value"].astype(float)
    for c, v in run_cols.items():
        kp[c] = pd.Series([v] * len(kp), dtype="string")
    _write_atomic(ev, _partition(root, "events", run_id), stamp)
    _write_atomic(kp, _partition(root, "kpis", run_id), stamp)


def delete_fleet_rows(root: Root, run_id: str) -> None:
    """Remove one run's rows from the fleet tables (nothing if it has none)."""
    for table in TABLES:
        with suppress(OSError):  # as before: rows left behind are removed by sync_fleet
            _partition(root, table, run_id).rmtree()


def read_fleet(root: Root, table: str) -> pd.DataFrame:
    """Read one fleet table of all runs (column ``run_id`` from the partition names).

    Parameters
    ----------
    table : {"events", "kpis"}
    """
    if table not in TABLES:
        raise ValueError(f"Fleet table must be one of {', '.join(TABLES)}, found {table!r}.")
    folder = Location.of(root) / FLEET_DIR / table
    files = sorted(
        i.path
        for i in folder.walk()
        if i.base_name == "part-0.parquet" and i.path.split("/")[-2].startswith("run_id=")
    )
    if not files:
        return pd.DataFrame()
    dataset = ds.dataset(
        files,
        filesystem=folder.fs,
        format="parquet",
        partitioning="hive",
        partition_base_dir=folder.path,
    )
    return dataset.to_table().to_pandas()
