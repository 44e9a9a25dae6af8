"""Fleet trends page on a large archive: API time, page data, first draw in Chromium.

Writes an archive of N invented runs (default 5,000: catalog rows through the
archive's own commit, fleet KPI partitions through ``write_fleet_rows``, each with
a saturation, slip, tip and roll KPI set over 3 controller versions and two years),
then measures, in the same run:

- the first ``/api/fleet/trends`` answer, which builds the trends cache file;
- the answer for each trend KPI once the cache exists (median of 3);
- its size (page data);
- the Fleet page's first full draw in headless Chromium (navigation to the chart drawn).

Usage: ``python benchmarks/bench_fleet.py [--runs N]``. Targets (issue): page data
< 2 MB and first draw < 2 s at 5,000 runs.
"""

from __future__ import annotations

import argparse
import statistics
import sys
import tempfile
import time
from datetime import UTC, datetime, timedelta
from pathlib import Path

import numpy as np
import pandas as pd

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))

from analysis.archive.fleet import write_fleet_rows  # noqa: E402
from analysis.archive.store import Archive  # noqa: E402
from analysis.archive.trends import TREND_KPIS  # noqa: E402

VERSIONS = ("lean-ctl 1.4", "lean-ctl 2.0", "lean-ctl 2.1")


def stock(root: Path, n: int, seed: int = 7) -> Archive:
    archive = Archive(root)
    rng = np.random.default_rng(seed)
    start = datetime(2025, 1, 6, 8, 0, tzinfo=UTC)
    empty = pd.DataFrame(columns=["kind", "channel", "start_s", "end_s", "duration_s", "peak"])
    for i in range(n):
        when = start + timedelta(hours=3.5 * i)
        version = VERSIONS[min(2, i * 3 // n)]
        meta = {
            "name": f"bench-{i:05d}",
            "course": "gullhaven-loop" if i % 3 else "gullhaven-sprint",
            "controller": version,
            "date": when.strftime("%Y-%m-%dT%H:%M:%SZ"),
            "duration_s": 600.0,
            "distance_m": 900.0 + 50 * rng.random(),
            "tags": ["bench"],
            "source_hash": f"{i:064x}",
            "ingested_at": when.strftime("%Y-%m-%dT%H:%M:%SZ"),
        }
        staging = archive.new_staging()
        run_id = archive.commit_run(staging, meta)
        kpis = {
            "saturation": {
                w: {"saturated_share": float(rng.beta(1, 80))} for w in ("wheel_l", "wheel_r")
            },
            "slip": {w: {"event_count": int(rng.poisson(3))} for w in ("wheel_l", "wheel_r")},
            "tip": {"min_margin": float(0.2 + 0.3 * rng.random())},
            "roll": {"rms": float(np.deg2rad(0.4 + 0.3 * rng.random()))},
        }
        write_fleet_rows(root, run_id, meta, empty, kpis)
    return archive


def main(argv: list[str]) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--runs", type=int, default=5000)
    args = parser.parse_args(argv)
    from fastapi.testclient import TestClient

    from server.app import create_app

    with tempfile.TemporaryDirectory() as tmp:
        root = Path(tmp) / "archive"
        t = time.perf_counter()
        stock(root, args.runs)
        print(f"stocked {args.runs} runs in {time.perf_counter() - t:.1f} s")
        app = create_app(root)
        with TestClient(app) as client:
            t = time.perf_counter()
            r = client.get("/api/fleet/trends", params={"kpi": "min_tip_margin"})
            print(
                f"first request, building the trends cache from {args.runs} partitions: "
                f"{time.perf_counter() - t:.2f} s"
            )
            for kpi in TREND_KPIS:
                times, size = [], 0
                for _ in range(3):
                    t = time.perf_counter()
                    r = client.get("/api/fleet/trends", params={"kpi": kpi})
                    times.append(time.perf_counter() - t)
                    size = len(r.content)
                print(
                    f"/api/fleet/trends?kpi={kpi:<24} {statistics.median(times) * 1000:7.0f} ms  {size / 1e6:.2f} MB"
                )
        draw_s = first_draw(app)
        print(f"Fleet page first full draw (headless Chromium, {args.runs} runs): {draw_s:.2f} s")
    return 0


def first_draw(app) -> float:
    from playwright.sync_api import sync_playwright

    from tests.web.live_server import CHROMIUM, CHROMIUM_ARGS, LiveServer

    with LiveServer(app) as server, sync_playwright() as p:
        browser = p.chromium.launch(
            executable_path=str(CHROMIUM), headless=True, args=CHROMIUM_ARGS
        )
        page = browser.new_page(viewport={"width": 1440, "height": 1000})
        t = time.perf_counter()
        page.goto(f"{server.url}/fleet.html")
        page.wait_for_selector("body[data-fleet-ready='1']", timeout=60_000)
        elapsed = time.perf_counter() - t
        browser.close()
    return elapsed


if __name__ == "__main__":
    raise SystemExit(main(sys.argv[1:]))
