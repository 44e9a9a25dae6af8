"""Batch re-analysis: in process, and mapped over runs on a Dask cluster."""

from __future__ import annotations

from pathlib import Path

import pytest

from analysis.archive.store import Archive
from analysis.detect.batch import reanalyse
from analysis.detect.pipeline import load_analysis
from analysis.ingest.stream import ingest_files

DEMO = Path(__file__).resolve().parents[3] / "demo_logs"


@pytest.fixture(scope="module")
def two_runs(tmp_path_factory):
    root = tmp_path_factory.mktemp("batch")
    archive = Archive(root)
    ids = []
    for name in ("loop-lean14-a", "loop-lean20-a"):
        files = [DEMO / f"{name}_state.csv.gz", DEMO / f"{name}_torque.csv.gz"]
        ids.append(
            ingest_files(archive, files, DEMO / "channel-map.toml", DEMO / "marram-2.toml").run_id
        )
    return root, ids


def test_in_process_analyses_every_run(two_runs):
    root, ids = two_runs
    outcomes = reanalyse(root, ids)
    assert [o.run_id for o in outcomes] == ids
    assert all(o.error is None and o.events and o.events > 0 for o in outcomes)
    assert all(load_analysis(Archive(root), r) is not None for r in ids)


def test_a_bad_run_is_reported_and_the_others_still_run(two_runs):
    root, ids = two_runs
    outcomes = reanalyse(root, [*ids, "no-such-run"])
    assert outcomes[-1].error is not None and "no-such-run" in outcomes[-1].error
    assert all(o.error is None for o in outcomes[:-1])


def test_on_a_dask_cluster_gives_the_same_results(two_runs):
    import distributed  # test extra: dask[distributed]

    root, ids = two_runs
    here = {o.run_id: o.events for o in reanalyse(root, ids)}
    with distributed.Client(processes=False, n_workers=1, threads_per_worker=2) as client:
        there = {o.run_id: o.events for o in reanalyse(root, ids, client)}
    assert there == here
