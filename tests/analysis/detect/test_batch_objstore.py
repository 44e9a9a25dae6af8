"""Re-analysis of runs in an object store on a Dask cluster whose workers share no folder.

Two worker processes (``distributed.LocalCluster``) read the runs' streams from a
real S3 server on loopback (moto in server mode, ``tests/s3_server.py``) and write
results and fleet rows back to it; nothing is shared on disk. The expected
values are the same runs analysed in this process.
"""

from __future__ import annotations

from pathlib import Path

import pandas as pd
import pytest

from analysis.archive.objstore import open_archive
from analysis.detect.batch import reanalyse
from analysis.detect.pipeline import load_analysis
from analysis.ingest.stream import ingest_files
from server.cli.main import main
from tests.server.dashboard_fixtures import write_planted_inputs

#: Runs re-analysed on the cluster (issue 14 asks for 10); each is 10 s at 100 Hz.
RUNS = 10


def test_two_worker_processes_reanalyse_ten_runs_from_the_store(
    s3_root: str, tmp_path: Path
) -> None:
    distributed = pytest.importorskip("distributed")  # test extra: dask[distributed]
    import duckdb
    import pyarrow.dataset as ds

    base = write_planted_inputs(tmp_path / "base")
    first = pd.read_csv(base.logs[0]).iloc[:1000]  # 10 s, before the planted hole
    store = open_archive(s3_root)
    ids = []
    for k in range(RUNS):
        folder = tmp_path / f"run{k}"
        folder.mkdir()
        log = folder / "plant_state.csv"
        first.assign(stamp_s=first["stamp_s"] + 100.0 * k).to_csv(log, index=False)
        outcome = ingest_files(store, [log], base.map_path, base.profile_path, course="bench")
        ids.append(outcome.run_id)
    assert len(set(ids)) == RUNS and not any(r["analysed"] for r in store.list_runs())

    with (
        distributed.LocalCluster(
            n_workers=2, threads_per_worker=1, processes=True, host="127.0.0.1",
            dashboard_address=None,
        ) as cluster,
        distributed.Client(cluster) as client,
    ):  # fmt: skip
        assert len(client.scheduler_info()["workers"]) == 2
        there = reanalyse(s3_root, ids, client)
        # The command line does the same on the cluster's address.
        assert main(["analyse-all", "--dask", cluster.scheduler_address, "--data", s3_root]) == 0
    assert [o.run_id for o in there] == ids and all(o.error is None for o in there), there
    assert all(r["analysed"] for r in store.list_runs())
    stored = {r: load_analysis(store, r) for r in ids}

    # The same runs analysed here give the same events and KPIs.
    here = reanalyse(s3_root, ids)
    assert [o.events for o in here] == [o.events for o in there]
    for run_id in ids:
        again = load_analysis(store, run_id)
        assert again is not None and stored[run_id] is not None
        assert again["kpis"] == stored[run_id]["kpis"]  # type: ignore[index]

    # The fleet rows the workers wrote: one partition per run, queried with SQL.
    loc = store.loc / "fleet" / "kpis"
    con = duckdb.connect()
    con.register("kpis", ds.dataset(loc.path, filesystem=loc.fs, partitioning="hive"))
    per_run = dict(con.sql("SELECT run_id, count(*) FROM kpis GROUP BY run_id").fetchall())
    assert sorted(per_run) == sorted(ids) and min(per_run.values()) > 0
