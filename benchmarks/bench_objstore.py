"""Benchmark: re-analysis of runs in an object store on a Dask LocalCluster of 1 and 2 workers.

Builds runs of the invented robot at 400 Hz (a simulated demo lap repeated, as in
``bench_analysis.py``), ingests them into an S3-compatible store, then re-analyses
all of them with ``outrigger``'s batch map (:func:`analysis.detect.batch.reanalyse`)
on a ``distributed.LocalCluster`` of 1 worker process, then of 2; every worker
reads the streams from the store and writes results and fleet rows back.
Prints the time of each, the speed-up, the bytes stored per run-hour, and a
projection per 1,000 run-hours (worker core-hours and stored GB, and their price
at the rates given by ``--usd-per-core-hour`` and ``--usd-per-gb-month``).

The store is ``--data s3://BUCKET/PREFIX`` with the AWS_* variables set, or else
a moto S3 server this script starts on 127.0.0.1 (in-memory: keep it small).

Run: ``.venv/bin/python benchmarks/bench_objstore.py`` (4 runs of 5 min) or
``--runs 20 --minutes 60`` (the full size of issue 14: 20 one-hour runs).
"""

from __future__ import annotations

import argparse
import os
import shutil
import sys
import time
from pathlib import Path

import pyarrow as pa
import pyarrow.parquet as pq

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))

from analysis import catalogue as cat  # noqa: E402
from analysis.archive.objstore import ObjectArchive, open_archive  # noqa: E402
from analysis.demo.logs import profile_toml  # noqa: E402
from analysis.detect.batch import reanalyse  # noqa: E402
from analysis.ingest.stream import ingest_files  # noqa: E402
from benchmarks.bench_analysis import build_frame, identity_map  # noqa: E402

OUT = ROOT / "bench-output" / "objstore"


def _local_store() -> tuple[str, object]:
    """Start a moto S3 server on loopback; return a fresh archive URI and the process."""
    from tests.s3_server import TEST_ENV, _start, new_bucket

    OUT.mkdir(parents=True, exist_ok=True)
    proc, url = _start(OUT / "moto.log")
    os.environ.update(TEST_ENV, AWS_ENDPOINT_URL=url)
    return f"s3://{new_bucket(url)}/bench", proc


def _warm(root: str) -> None:
    """Load the analysis modules and open the archive in a worker before timing."""
    import analysis.detect.pipeline  # noqa: F401

    open_archive(root).list_runs()


def _stored_bytes(archive: ObjectArchive) -> int:
    return sum(int(i.size or 0) for i in (archive.loc / "runs").walk())


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--runs", type=int, default=4, help="number of runs (default 4)")
    parser.add_argument("--minutes", type=float, default=5.0, help="length of each run (5)")
    parser.add_argument("--workers", default="1,2", help="cluster sizes to time (1,2)")
    parser.add_argument("--data", help="s3://BUCKET/PREFIX (default: a local moto server)")
    parser.add_argument(
        "--usd-per-core-hour", type=float, default=0.04,
        help="price of one worker core for an hour (default 0.04, an assumed on-demand rate)",
    )  # fmt: skip
    parser.add_argument(
        "--usd-per-gb-month", type=float, default=0.023,
        help="price of a GB stored for a month (default 0.023, an assumed object-store rate)",
    )  # fmt: skip
    args = parser.parse_args()
    import distributed

    server = None
    root = args.data
    if root is None:
        root, server = _local_store()
    try:
        archive = open_archive(root)
        assert isinstance(archive, ObjectArchive), "--data must be an s3:// URI"
        shutil.rmtree(OUT / "logs", ignore_errors=True)
        (OUT / "logs").mkdir(parents=True)
        t0 = time.perf_counter()
        frame = build_frame(args.minutes)
        (OUT / "map.toml").write_text(identity_map(list(frame.columns)))
        (OUT / "profile.toml").write_text(profile_toml())
        print(
            f"{args.runs} run(s) of {args.minutes:g} min, {len(frame):,} rows x "
            f"{frame.shape[1]} columns at 400 Hz; store {root}"
        )
        ids = []
        ingest_s = 0.0
        for k in range(args.runs):
            src = OUT / "logs" / "run.parquet"
            shifted = frame.assign(**{cat.T: frame[cat.T] + 0.001 * k})  # other bytes, other run
            pq.write_table(pa.Table.from_pandas(shifted, preserve_index=False), src)
            t1 = time.perf_counter()
            ids.append(ingest_files(archive, [src], OUT / "map.toml", OUT / "profile.toml").run_id)
            ingest_s += time.perf_counter() - t1
            src.unlink()
        del frame
        stored = _stored_bytes(archive)
        run_hours = args.runs * args.minutes / 60.0
        print(
            f"prepared in {time.perf_counter() - t0:.0f} s; ingest into the store "
            f"{ingest_s / args.runs:.1f} s per run; {stored / 1e6:.0f} MB stored"
        )

        times: dict[int, float] = {}
        for workers in [int(w) for w in args.workers.split(",")]:
            with (
                distributed.LocalCluster(
                    n_workers=workers, threads_per_worker=1, processes=True,
                    host="127.0.0.1", dashboard_address=None, memory_limit=0,
                ) as cluster,
                distributed.Client(cluster) as client,
            ):  # fmt: skip
                client.run(_warm, root)  # imports and the S3 client, outside the timing
                t1 = time.perf_counter()
                outcomes = reanalyse(root, ids, client)
                times[workers] = time.perf_counter() - t1
            failed = [o for o in outcomes if o.error]
            if failed:
                raise SystemExit(f"{len(failed)} run(s) failed: {failed[0].error}")
            print(
                f"re-analysis on {workers} worker(s): {times[workers]:7.1f} s "
                f"({times[workers] / args.runs:.1f} s per run)"
            )
        if 1 in times and 2 in times:
            print(f"speed-up 1 -> 2 workers: {times[1] / times[2]:.2f}x")
        one = min(times, key=lambda w: w)
        core_h = times[one] * one / 3600.0 / run_hours * 1000.0
        gb = stored / 1e9 / run_hours * 1000.0
        print(
            f"per 1,000 run-hours: {core_h:.1f} worker core-hours "
            f"(${core_h * args.usd_per_core_hour:.2f} at ${args.usd_per_core_hour}/core-hour), "
            f"{gb:.0f} GB stored (${gb * args.usd_per_gb_month:.2f} per month at "
            f"${args.usd_per_gb_month}/GB-month)"
        )
    finally:
        if server is not None:
            server.terminate()  # type: ignore[attr-defined]
            server.wait()  # type: ignore[attr-defined]


if __name__ == "__main__":
    main()
