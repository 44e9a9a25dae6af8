"""The archive on an S3-compatible object store, against a real S3 server on loopback.

The server is moto in server mode (``tests/s3_server.py``), spoken to over HTTP
by pyarrow's S3 client: no client is mocked. The reference for every result is
the local folder archive given the same input files (its tests check the
physics); here the object store must give the same runs and the same results.
"""

from __future__ import annotations

import os
import signal
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import pandas as pd
import pyarrow.fs as pafs
import pytest

from analysis.archive import objstore
from analysis.archive.location import Location
from analysis.archive.objstore import ObjectArchive, open_archive
from analysis.archive.overview_store import read_overview
from analysis.archive.store import Archive
from analysis.detect.pipeline import analyse_run, load_analysis
from analysis.errors import ArchiveError, RunNotFoundError
from analysis.ingest.stream import ingest_files
from tests.server.dashboard_fixtures import RunInputs, write_planted_inputs

REPO = Path(__file__).resolve().parents[3]


@pytest.fixture(scope="module")
def planted(tmp_path_factory: pytest.TempPathFactory) -> RunInputs:
    return write_planted_inputs(tmp_path_factory.mktemp("planted-s3"))


def shifted_inputs(base: RunInputs, folder: Path, shift_s: float) -> RunInputs:
    """The planted run started ``shift_s`` later: other source bytes, so another run."""
    folder.mkdir(parents=True, exist_ok=True)
    frame = pd.read_csv(base.logs[0])
    frame["stamp_s"] += shift_s
    log = folder / "plant_state.csv"
    frame.to_csv(log, index=False)
    return RunInputs([log], base.map_path, base.profile_path)


def _ingest(archive: Archive, inputs: RunInputs, **meta: object) -> str:
    return ingest_files(archive, inputs.logs, inputs.map_path, inputs.profile_path, **meta).run_id


def test_a_uri_opens_an_object_store_archive_and_a_path_the_local_one(s3_root, tmp_path):
    assert isinstance(open_archive(s3_root), ObjectArchive)
    local = open_archive(tmp_path / "a")
    assert type(local) is Archive and (tmp_path / "a" / "catalog.sqlite").is_file()


def test_a_missing_bucket_is_a_clear_error(s3_endpoint):
    with pytest.raises(ArchiveError, match="bucket 'no-such-bucket-x' .* does not exist"):
        open_archive("s3://no-such-bucket-x/archive")
    with pytest.raises(ArchiveError, match="needs a bucket"):
        open_archive("s3://")


def test_ingest_and_analyse_give_what_the_local_archive_gives(s3_root, planted, tmp_path):
    local = Archive(tmp_path / "local")
    local_id = _ingest(local, planted, course="test-bench", tags=("a", "b"))
    analyse_run(local, local_id)
    expected = load_analysis(local, local_id)

    store = open_archive(s3_root)
    run_id = _ingest(store, planted, course="test-bench", tags=("a", "b"))
    # the id carries 16 hex digits of the source hash (the local one 6): same source, same prefix
    assert run_id.startswith(local_id) and len(run_id) == len(local_id) + 10
    runs = store.list_runs()
    assert [r["run_id"] for r in runs] == [run_id] and runs[0]["analysed"] is False
    assert runs[0]["tags"] == ["a", "b"] and runs[0]["course"] == "test-bench"
    pd.testing.assert_frame_equal(store.load_frame(run_id), local.load_frame(local_id))

    analyse_run(store, run_id)
    got = load_analysis(store, run_id)
    assert got is not None and expected is not None
    assert got["events"] == expected["events"]
    assert got["kpis"] == expected["kpis"]
    assert store.list_runs()[0]["analysed"] is True
    # The chart overview stored with the results is current (not rebuilt on first use).
    assert read_overview(store, run_id) is not None
    # Nothing of the object-store archive is written to the working folder.
    assert not Path("catalog.sqlite").exists()

    # A second archive object (another machine) sees the same run, analysed.
    other = ObjectArchive(s3_root)
    assert [r["run_id"] for r in other.list_runs(tag="b")] == [run_id]
    assert other.list_runs(tag="zzz") == [] and other.list_runs(course="elsewhere") == []
    series = other.read_result_series(run_id, ["roll_error"], t0=1.0, t1=2.0)
    assert series["t"].between(1.0, 2.0).all() and len(series) > 0


def test_reanalysis_replaces_results_through_one_pointer(s3_root, planted):
    store = open_archive(s3_root)
    run_id = _ingest(store, planted)
    assert not store.is_analysed(run_id)
    analyse_run(store, run_id)
    assert store.is_analysed(run_id)
    first = store.series_location(run_id)
    analyse_run(store, run_id)
    second = store.series_location(run_id)
    assert first is not None and second is not None and first.path != second.path
    assert second.is_file() and not first.is_file()  # old results removed after the swap


def test_meta_edit_and_delete(s3_root, planted):
    store = open_archive(s3_root)
    run_id = _ingest(store, planted)
    analyse_run(store, run_id)
    store.update_meta(run_id, name="renamed", tags=["x"])
    assert ObjectArchive(s3_root).get_meta(run_id)["name"] == "renamed"
    store.delete_run(run_id)
    assert store.list_runs() == []
    with pytest.raises(RunNotFoundError):
        store.get_meta(run_id)
    assert list((store.loc / "runs").walk()) == []
    assert list((store.loc / "fleet").walk()) == []


_KILLED = """
import os, sys, time
from analysis.archive import objstore
from analysis.archive.location import Location
from analysis.archive.objstore import open_archive
from analysis.ingest.stream import ingest_files

real = Location.upload
def upload_then_hang(self, source):
    real(self, source)
    open(sys.argv[1], "w").close()  # one object is in the store: kill me now
    time.sleep(120)
Location.upload = upload_then_hang
ingest_files(open_archive(sys.argv[2]), [sys.argv[3]], sys.argv[4], sys.argv[5])
"""


def test_a_killed_ingest_leaves_no_visible_run(s3_root, planted, tmp_path, monkeypatch):
    marker = tmp_path / "uploaded"
    proc = subprocess.Popen(
        [sys.executable, "-c", _KILLED, str(marker), s3_root, str(planted.logs[0]),
         str(planted.map_path), str(planted.profile_path)],
        cwd=REPO, env={**os.environ, "PYTHONPATH": str(REPO)},
    )  # fmt: skip
    try:
        deadline = time.monotonic() + 120
        while not marker.exists():
            assert proc.poll() is None, "the ingest ended before it was killed"
            assert time.monotonic() < deadline
            time.sleep(0.05)
        os.kill(proc.pid, signal.SIGKILL)
    finally:
        proc.kill()
        proc.wait()
    staged = list(Path(tempfile.gettempdir()).glob(f"outrigger-staging-{proc.pid}-*"))
    assert staged, "the killed ingest had a local staging folder"
    store = open_archive(s3_root)
    assert not any(p.exists() for p in staged)  # removed: its process is gone
    left = list((store.loc / "runs").walk())
    assert left, "the killed ingest had written a stream object"
    assert store.list_runs() == []  # ... but no manifest, so no run
    assert store.find_by_hash("x") is None
    assert store.sweep(min_age_s=3600) == []  # too young: could be an ingest in progress
    # The next ingest (of other files) sweeps leftovers older than SWEEP_AGE_S (made 0 here).
    monkeypatch.setattr(objstore, "SWEEP_AGE_S", 0.0)
    other = _ingest(store, shifted_inputs(planted, tmp_path / "other", 60.0))
    keys = {i.path for i in (store.loc / "runs").walk()}
    assert not keys & {i.path for i in left}
    assert all(f"/runs/{other}/" in k for k in keys)
    # The killed ingest's files ingest cleanly afterwards.
    run_id = _ingest(store, planted)
    assert sorted(r["run_id"] for r in store.list_runs()) == sorted([run_id, other])


def _cli(*args: str) -> subprocess.Popen[str]:
    return subprocess.Popen(
        [sys.executable, "-m", "server.cli.main", *args],
        cwd=REPO,
        env={**os.environ, "PYTHONPATH": str(REPO)},
        stdout=subprocess.PIPE,
        stderr=subprocess.PIPE,
        text=True,
    )


def test_two_concurrent_ingests_both_keep_their_run(s3_root, planted, tmp_path):
    inputs = [planted, shifted_inputs(planted, tmp_path / "later", 3600.0)]
    procs = [
        _cli("ingest", *map(str, i.logs), "--map", str(i.map_path),
             "--profile", str(i.profile_path), "--no-analyse", "--quiet", "--data", s3_root)
        for i in inputs + inputs
    ]  # fmt: skip
    outs = [p.communicate(timeout=300) for p in procs]
    assert [p.returncode for p in procs] == [0, 0, 0, 0], outs
    ids = [o.strip().splitlines()[-1] for o, _ in outs]
    # Two different runs; each ingested twice at once, which gives the same run again.
    assert ids[0] == ids[2] and ids[1] == ids[3] and ids[0] != ids[1]
    assert sorted(r["run_id"] for r in open_archive(s3_root).list_runs()) == sorted(ids[:2])


def test_location_keeps_to_the_archive(s3_root):
    loc = Location.of(s3_root)
    for bad in ("..", "a/../b", ""):
        with pytest.raises(ArchiveError):
            loc / bad
    assert isinstance(loc.fs, pafs.S3FileSystem) and str(loc) == s3_root


def test_credentials_come_from_the_aws_variables(s3_root, monkeypatch):
    monkeypatch.delenv("AWS_ENDPOINT_URL")
    monkeypatch.setenv("AWS_ENDPOINT_URL", "http://127.0.0.1:9")  # nothing listens there
    monkeypatch.setenv("AWS_EC2_METADATA_DISABLED", "true")
    with pytest.raises(ArchiveError, match="cannot be reached"):
        open_archive(s3_root)


def test_fleet_tables_in_the_store_answer_sql(s3_root, planted, tmp_path):
    """DuckDB over the partitioned fleet tables in the store.

    DuckDB's own S3 reader (the httpfs extension) is downloaded on first use, which
    this machine cannot do; DuckDB scans the Arrow dataset pyarrow reads from the
    store instead (the same hive-partitioned files ``read_parquet('s3://...')`` reads).
    """
    duckdb = pytest.importorskip("duckdb")
    import pyarrow.dataset as ds

    store = open_archive(s3_root)
    ids = [_ingest(store, planted), _ingest(store, shifted_inputs(planted, tmp_path / "b", 60.0))]
    for run_id in ids:
        analyse_run(store, run_id)
    loc = store.loc / "fleet" / "events"
    con = duckdb.connect()
    con.register(
        "events", ds.dataset(loc.path, filesystem=loc.fs, format="parquet", partitioning="hive")
    )
    rows = con.sql(
        "SELECT run_id, kind, count(*) AS n FROM events GROUP BY run_id, kind ORDER BY run_id, kind"
    ).fetchall()
    expected = sorted(
        (run_id, kind, n)
        for run_id in ids
        for kind, n in pd.Series(
            [e["kind"] for e in (load_analysis(store, run_id) or {})["events"]]
        )
        .value_counts()
        .items()
    )
    assert rows == expected and len(rows) > 0


def test_duckdb_reads_the_fleet_tables_with_its_own_s3_reader(s3_root, s3_endpoint, planted):
    """DuckDB's httpfs reader with its S3 settings, where the extension can be installed."""
    duckdb = pytest.importorskip("duckdb")
    con = duckdb.connect()
    try:
        con.execute("INSTALL httpfs")
        con.execute("LOAD httpfs")
    except duckdb.Error as exc:  # downloaded on first use; impossible without internet
        pytest.skip(f"DuckDB's httpfs extension cannot be installed here ({exc})")
    store = open_archive(s3_root)
    run_id = _ingest(store, planted)
    analyse_run(store, run_id)
    host = s3_endpoint.split("://", 1)[1]
    con.execute(
        f"SET s3_endpoint = '{host}'; SET s3_use_ssl = false; SET s3_url_style = 'path';"
        f"SET s3_region = '{os.environ['AWS_REGION']}';"
        f"SET s3_access_key_id = '{os.environ['AWS_ACCESS_KEY_ID']}';"
        f"SET s3_secret_access_key = '{os.environ['AWS_SECRET_ACCESS_KEY']}';"
    )
    rows = con.sql(
        f"SELECT run_id, count(*) FROM read_parquet('{s3_root}/fleet/events/*/*.parquet', "
        "hive_partitioning = true) GROUP BY run_id"
    ).fetchall()
    events = (load_analysis(store, run_id) or {})["events"]
    assert rows == [(run_id, len(events))] and len(events) > 0
