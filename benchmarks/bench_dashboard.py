"""Benchmark: the Run page of a one-hour, 400 Hz run, against plotting every sample.

Builds the run as ``bench_analysis.py`` does (a simulated demo lap of the invented
robot repeated to one hour at 400 Hz), ingests and analyses it into a scratch
archive under ``bench-output/dashboard/`` (git-ignored; reused when present),
serves the real app with uvicorn on 127.0.0.1 and measures:

* the series request of the Run page at the page's point budget (every signal
  it draws), with the server's chart cache cold and warm; a zoom request (10 s);
* in headless Chromium (Debian's ``/usr/bin/chromium``) with a browser profile on
  disk: navigation to all charts drawn on a first visit (empty profile: nothing
  cached by the browser) and on returning visits (server cache cold and warm),
  the bytes of JSON the page loaded, and zoom round trips (request + redraw, and
  from the zoom gesture including the pause);
* beside them, the same figures for a figure that plots every sample of the
  roll and tip-over timelines: JSON bytes, server time, and the time Chromium
  takes to fetch it and draw it with the page's own strip chart. On a run longer
  than an hour only its first hour is plotted so (``--every-sample-minutes``):
  eight hours of every sample is several GB of JSON, more than the machine holds
  beside the run and more than Chromium takes.

On a run whose chart columns do not fit the server's chart cache (an eight-hour
run: about 3 GB of float64 against the 1 GiB default), the step "run without a
stored overview" is left out: it reduces the whole run from its samples, which
reads every column of the run at once.

The peak resident memory of this process (server, benchmark and the every-sample
JSON; Chromium is a separate process) is printed at the end, and then, for each
picture of the Run page (course map, actuator envelope, calibration check), the
time and peak resident memory of a fresh process that computes it from the
archive (``--no-pictures`` to skip).

Targets (dashboard issue): first full draw under 2 s, a zoom round trip under
200 ms, the page's data under 2 MB however long the run.

Run: ``.venv/bin/python benchmarks/bench_dashboard.py [--minutes N] [--fresh]
[--every-sample-minutes M] [--no-browser] [--no-pictures]`` (``--minutes 480`` for the eight-hour run).
"""

from __future__ import annotations

import argparse
import json
import resource
import shutil
import socket
import statistics
import sys
import threading
import time
from pathlib import Path
from typing import Any

import httpx
import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq
from fastapi import Response

sys.path.insert(0, str(Path(__file__).resolve().parent))

from bench_analysis import RATE_HZ, build_frame, identity_map  # noqa: E402

from analysis import catalogue as cat  # noqa: E402
from analysis.archive.overview_store import OVERVIEW_FILE  # noqa: E402
from analysis.archive.store import Archive  # noqa: E402
from analysis.demo.logs import profile_toml  # noqa: E402
from analysis.detect.pipeline import analyse_run  # noqa: E402
from analysis.ingest.stream import ingest_files  # noqa: E402
from server.app import create_app  # noqa: E402

ROOT = Path(__file__).resolve().parent.parent
OUT = ROOT / "bench-output" / "dashboard"
CHROMIUM = "/usr/bin/chromium"
CHROMIUM_ARGS = [
    "--no-sandbox",
    "--disable-gpu",
    "--disable-quic",
    "--no-first-run",
    "--disable-background-networking",
    "--disable-component-update",
    "--disable-sync",
]
#: Signals of the every-sample figure: the roll and tip-over timelines.
FULL_SIGNALS = (cat.ROLL, cat.ROLL_REF, cat.ROLL_ZMP_LEAN, cat.ROLL_ERROR, cat.TIP_MARGIN)
REPEATS = 5
#: Point budget per trace the Run page asks for at 1440 px wide (one point per pixel
#: column of the plot area; web/js/timeline.js).
PAGE_POINTS = 932


def prepare(minutes: float, fresh: bool) -> tuple[Path, str]:
    """The scratch archive and the id of its analysed one-hour run (built once)."""
    archive_dir = OUT / "archive"
    if not fresh and archive_dir.is_dir():
        runs = Archive(archive_dir).list_runs()
        if runs and runs[0]["analysed"] and abs(runs[0]["duration_s"] - 60 * minutes) < 1:
            return archive_dir, runs[0]["run_id"]
    shutil.rmtree(OUT, ignore_errors=True)
    OUT.mkdir(parents=True)
    t0 = time.perf_counter()
    frame = build_frame(minutes)
    src = OUT / "run.parquet"
    pq.write_table(pa.Table.from_pandas(frame, preserve_index=False), src, compression="zstd")
    (OUT / "map.toml").write_text(identity_map(list(frame.columns)))
    (OUT / "profile.toml").write_text(profile_toml())
    print(f"built {len(frame):,} rows x {frame.shape[1]} columns at {RATE_HZ:g} Hz", flush=True)
    del frame
    archive = Archive(archive_dir)
    run_id = ingest_files(archive, [src], OUT / "map.toml", OUT / "profile.toml").run_id
    analyse_run(archive, run_id)
    print(f"ingested and analysed in {time.perf_counter() - t0:.1f} s", flush=True)
    return archive_dir, run_id


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        port: int = s.getsockname()[1]
        return port


def every_sample_json(archive_dir: Path, run_id: str, minutes: float) -> bytes:
    """JSON of every sample of :data:`FULL_SIGNALS` over the run's first ``minutes``
    (what an undownsampled figure needs)."""
    archive = Archive(archive_dir)
    raw = [s for s in FULL_SIGNALS if s in archive.columns(run_id)]
    end = 60.0 * minutes
    frame = archive.load_frame(run_id, columns=raw, t1=end)
    frame = frame[frame[cat.T] < end]
    derived = archive.read_result_series(
        run_id, columns=[s for s in FULL_SIGNALS if s not in raw], t1=end
    )
    derived = derived[derived[cat.T] < end]
    t = frame[cat.T].to_numpy().tolist()
    traces = {}
    for name in FULL_SIGNALS:
        source = frame if name in frame else derived
        y = source[name].to_numpy(dtype=float, na_value=np.nan)
        traces[name] = {"t": t, "y": [None if v != v else v for v in y.tolist()]}
    return json.dumps({"signals": traces}, separators=(",", ":")).encode()


def timed_get(
    client: httpx.Client, url: str, params: dict[str, Any], before: Any = None
) -> tuple[float, int]:
    """Median time [s] of REPEATS requests (``before()`` runs ahead of each), and the size."""
    times, size = [], 0
    for _ in range(REPEATS):
        if before is not None:
            before()
        t0 = time.perf_counter()
        response = client.get(url, params=params)
        times.append(time.perf_counter() - t0)
        response.raise_for_status()
        size = len(response.content)
    return statistics.median(times), size


def _page_load(context: Any, base: str, run_id: str) -> tuple[Any, float, float]:
    """Open the Run page; (page, navigation to all charts drawn [ms], JSON loaded [bytes])."""
    page = context.new_page()
    sizes: list[int] = []
    page.on(
        "response",
        lambda r, sizes=sizes: sizes.append(len(r.body())) if "/api/" in r.url else None,
    )
    page.goto(f"{base}/run.html?id={run_id}")
    page.wait_for_selector("body[data-charts-ready='1']", timeout=120_000)
    return page, float(page.evaluate("document.body.dataset.chartsReadyMs")), float(sum(sizes))


def _zooms(page: Any, starts: tuple[float, ...]) -> tuple[list[float], list[float], list[float]]:
    """Zoom every chart to 10 s windows (what a drag across a chart or an event click does).

    Returns (request + redraw [ms], zoom to redrawn [ms], the request alone [ms]).
    """
    refresh, whole, fetch = [], [], []
    for t0 in starts:
        page.evaluate("() => { delete document.body.dataset.refreshMs; }")
        page.evaluate(
            "([a, b]) => document.getElementById('charts').timelines.setRange([a, b])",
            [t0, t0 + 10],
        )
        page.wait_for_function("() => document.body.dataset.refreshMs !== undefined")
        refresh.append(float(page.evaluate("document.body.dataset.refreshMs")))
        whole.append(float(page.evaluate("document.body.dataset.zoomMs")))
        fetch.append(float(page.evaluate("document.body.dataset.fetchMs")))
    return refresh, whole, fetch


def _in_run(hour_s: float, duration_s: float) -> float:
    """A time picked for the one-hour run, at the same share of a run of ``duration_s``.

    The 10 s zoom window that starts there stays inside the run (a window past the end
    draws nothing new, and the page would never report a redraw).
    """
    return max(0.0, min(hour_s * duration_s / 3600.0, duration_s - 10.0))


def browser_figures(base: str, run_id: str, cache: Any, duration_s: float) -> dict[str, float]:
    """The Run page in headless Chromium with a browser profile on disk, as a user has.

    * first visit: empty profile (nothing compiled or cached by the browser), server
      cache cold;
    * returning visit, server cache cold (the run not opened since the server started);
    * returning visit, server cache warm;
    and zoom round trips, the page's JSON bytes and the every-sample figure.
    """
    import tempfile

    from playwright.sync_api import sync_playwright

    out: dict[str, float] = {}
    with sync_playwright() as p:
        first, data_bytes = [], []
        for _ in range(3):
            with tempfile.TemporaryDirectory(prefix="bench-profile-") as profile:
                context = p.chromium.launch_persistent_context(
                    profile,
                    executable_path=CHROMIUM,
                    headless=True,
                    args=CHROMIUM_ARGS,
                    viewport={"width": 1440, "height": 1000},
                )
                cache.clear()
                page, ms, size = _page_load(context, base, run_id)
                first.append(ms)
                data_bytes.append(size)
                context.close()
        out["first_visit_ms"] = statistics.median(first)
        out["page_bytes"] = statistics.median(data_bytes)

        with tempfile.TemporaryDirectory(prefix="bench-profile-") as profile:
            context = p.chromium.launch_persistent_context(
                profile,
                executable_path=CHROMIUM,
                headless=True,
                args=CHROMIUM_ARGS,
                viewport={"width": 1440, "height": 1000},
            )
            for _ in range(2):  # the browser caches and compiles the page's scripts
                _page_load(context, base, run_id)[0].close()
            cold, warm, refresh, whole, fetch = [], [], [], [], []
            for i in range(3):
                cache.clear()
                page, ms, _ = _page_load(context, base, run_id)
                cold.append(ms)
                page.close()
                page, ms, _ = _page_load(context, base, run_id)
                warm.append(ms)
                hour = (600.0 + 700 * i, 1800.0 + 300 * i, 2900.0 - 200 * i)
                r, w, f = _zooms(page, tuple(_in_run(x, duration_s) for x in hour))
                refresh += r
                whole += w
                fetch += f
                page.close()
            context.close()
        out["return_cold_ms"] = statistics.median(cold)
        out["return_warm_ms"] = statistics.median(warm)
        out["zoom_ms"] = statistics.median(refresh)
        out["zoom_whole_ms"] = statistics.median(whole)
        out["zoom_fetch_ms"] = statistics.median(fetch)

        browser = p.chromium.launch(executable_path=CHROMIUM, headless=True, args=CHROMIUM_ARGS)
        page = browser.new_page(viewport={"width": 1440, "height": 1000})
        page.goto(f"{base}/api.html")
        try:
            # The same canvas strip chart the Run page uses, given every sample.
            ms = page.evaluate(
                """async (url) => {
                    const sc = await import('/js/stripchart.js');
                    const start = performance.now();
                    const body = await (await fetch(url)).json();
                    const names = Object.keys(body.signals);
                    const host = document.createElement('div');
                    document.body.prepend(host);
                    const chart = new sc.StripChart(host, names.map((n) => ({label: n, unit: ''})));
                    const traces = names.map((n, i) => ({row: i, x: body.signals[n].t,
                        y: body.signals[n].y, color: '#1F2A30', width: 1, dash: 'solid', name: n}));
                    const t = traces[0].x;
                    chart.setData({traces, bands: [], lines: [], range: [t[0], t[t.length - 1]]});
                    chart.resize();
                    return performance.now() - start;
                }""",
                f"{base}/bench/every-sample",
            )
            out["full_draw_ms"] = float(ms)
        except Exception as exc:  # the browser gave up: report it instead of a number
            print(f"every-sample figure failed in Chromium: {exc}")
            out["full_draw_ms"] = float("nan")
        browser.close()
    return out


#: The Run page's pictures as called by their routes, each timed in a fresh process.
PICTURES = {
    "course map (tip-over margin)": "pictures.course_map(a, rid, 'tip_margin')",
    "actuator envelope (first wheel)": "pictures.envelope(a, rid)",
    "calibration check": "pictures.calibration(a, rid)",
}

# The peak is the kernel's VmHWM of the child's own memory: ru_maxrss would carry the
# parent's peak over fork and exec (Linux keeps it), VmHWM starts anew with exec.
_PICTURE_CHILD = """
import json, sys, time
from analysis.archive.store import Archive
from analysis.detect import pictures
def hwm_kib():
    with open("/proc/self/status") as f:
        return next(int(line.split()[1]) for line in f if line.startswith("VmHWM:"))
a, rid = Archive(sys.argv[1]), sys.argv[2]
before = hwm_kib()
t0, c0 = time.perf_counter(), time.process_time()
out = {call}
wall, cpu = time.perf_counter() - t0, time.process_time() - c0
peak = hwm_kib()
print(json.dumps({{"wall_s": wall, "cpu_s": cpu, "peak_kib": peak, "start_kib": before,
                  "json_bytes": len(json.dumps(out))}}))
"""


def picture_figures(archive_dir: Path, run_id: str) -> dict[str, dict[str, float]]:
    """Time and peak RSS of each Run page picture, each in a fresh process."""
    import subprocess

    out = {}
    for name, call in PICTURES.items():
        done = subprocess.run(
            [sys.executable, "-c", _PICTURE_CHILD.format(call=call), str(archive_dir), run_id],
            capture_output=True,
            text=True,
            check=True,
        )
        out[name] = json.loads(done.stdout.strip().splitlines()[-1])
    return out


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--minutes", type=float, default=60.0, help="run length (default 60)")
    parser.add_argument("--fresh", action="store_true", help="rebuild the scratch archive")
    parser.add_argument("--no-browser", action="store_true", help="skip the Chromium figures")
    parser.add_argument("--no-pictures", action="store_true", help="skip the pictures' processes")
    parser.add_argument(
        "--every-sample-minutes",
        type=float,
        default=60.0,
        help="length of the every-sample figure, from the run's start (default 60)",
    )
    args = parser.parse_args()
    every_minutes = min(args.minutes, args.every_sample_minutes)

    archive_dir, run_id = prepare(args.minutes, args.fresh)
    import uvicorn

    app = create_app(archive_dir)
    t0 = time.perf_counter()
    full = every_sample_json(archive_dir, run_id, every_minutes)
    full_server_s = time.perf_counter() - t0

    @app.get("/bench/every-sample", include_in_schema=False)
    def every_sample() -> Response:  # bench-only route, never part of the product
        return Response(full, media_type="application/json")

    # The static mount answers "/" last; move the bench route in front of it.
    app.router.routes.insert(0, app.router.routes.pop())
    port = _free_port()
    server = uvicorn.Server(uvicorn.Config(app, host="127.0.0.1", port=port, log_level="warning"))
    thread = threading.Thread(target=server.run, daemon=True)
    thread.start()
    while not server.started:
        time.sleep(0.05)
    base = f"http://127.0.0.1:{port}"
    cache = app.state.run_cache
    try:
        with httpx.Client(base_url=base, timeout=120) as client:
            panels = client.get(f"/api/runs/{run_id}/charts").json()["panels"]
            signals = sorted({t["signal"] for p in panels for r in p["rows"] for t in r["traces"]})
            every = {"signals": ",".join(signals), "points": PAGE_POINTS}
            url = f"/api/runs/{run_id}/series"
            # Float64 arrays of every drawn signal and the two time axes (frame, series).
            chart_bytes = 60.0 * args.minutes * RATE_HZ * (len(signals) + 2) * 8
            build_s = built_s = float("nan")
            if chart_bytes <= cache.max_bytes:
                overview_file = archive_dir / "runs" / run_id / OVERVIEW_FILE
                overview_file.unlink(missing_ok=True)  # as for a run stored before overviews
                cache.clear()
                t0 = time.perf_counter()
                client.get(url, params=every).raise_for_status()
                build_s = time.perf_counter() - t0
                cache.wait_warm()
                built_s = time.perf_counter() - t0

            def cold() -> None:
                cache.wait_warm()  # the last request's background warm-up would compete
                cache.clear()

            cold_s, _ = timed_get(client, url, every, before=cold)
            cache.wait_warm()
            cache.clear()
            client.get(url, params=every).raise_for_status()
            t0 = time.perf_counter()
            cache.wait_warm()
            warm_up_s = time.perf_counter() - t0
            page_s, page_bytes = timed_get(client, url, every)
            z0 = _in_run(1800.0, 60.0 * args.minutes)
            zoom_s, zoom_bytes = timed_get(client, url, {**every, "t0": z0, "t1": z0 + 10})
            sub_s, sub_bytes = timed_get(
                client, url, {"signals": ",".join(FULL_SIGNALS), "points": PAGE_POINTS}
            )
        figures = (
            {} if args.no_browser else browser_figures(base, run_id, cache, 60.0 * args.minutes)
        )
    finally:
        server.should_exit = True
        thread.join(timeout=10)

    mb = 1024 * 1024
    print(f"\nRun page of a {args.minutes:g}-minute, {RATE_HZ:g} Hz run ({len(signals)} signals):")
    print(f"  series of every drawn signal, budget {PAGE_POINTS} points each, one request:")
    print(f"    server cache cold             {cold_s * 1e3:8.0f} ms  {page_bytes / mb:8.2f} MB")
    print(f"    server cache warm             {page_s * 1e3:8.0f} ms")
    print("    (both reduced from the run's stored whole-run overview)")
    if build_s == build_s:
        print(
            f"    run without a stored overview {build_s * 1e3:8.0f} ms  (from the samples; "
            f"its overview built in the background in {built_s:.1f} s)"
        )
    else:
        print(
            f"    run without a stored overview: not measured (its {chart_bytes / mb:,.0f} MB "
            f"of chart columns pass the cache's {cache.max_bytes / mb:,.0f} MB)"
        )
    print(f"  columns loaded in the background after a cold first draw {warm_up_s * 1e3:6.0f} ms")
    print(f"  zoom request, 10 s window       {zoom_s * 1e3:8.0f} ms  {zoom_bytes / mb:8.2f} MB")
    if figures:
        print("  navigation to all charts drawn (target < 2000 ms):")
        print(
            f"    first visit, empty browser profile, server cache cold {figures['first_visit_ms']:6.0f} ms"
        )
        print(
            f"    returning visit, server cache cold                    {figures['return_cold_ms']:6.0f} ms"
        )
        print(
            f"    returning visit, server cache warm                    {figures['return_warm_ms']:6.0f} ms"
        )
        print(
            f"  page JSON loaded                {figures['page_bytes'] / mb:8.2f} MB   (target < 2)"
        )
        print(
            f"  zoom round trip, request + redraw of all charts {figures['zoom_ms']:6.0f} ms (target < 200)"
        )
        print(
            f"    of which the series request (one for all charts) {figures['zoom_fetch_ms']:6.0f} ms"
        )
        print(
            f"  zoom gesture to all charts redrawn (with the pause) {figures['zoom_whole_ms']:6.0f} ms"
        )
    print(
        f"Roll and tip-over timelines ({len(FULL_SIGNALS)} signals), downsampled vs every sample:"
    )
    print(f"  downsampled: request {sub_s * 1e3:8.0f} ms, {sub_bytes / mb:8.2f} MB")
    print(
        f"  every sample of the first {every_minutes:g} minutes: server "
        f"{full_server_s * 1e3:8.0f} ms, {len(full) / mb:8.2f} MB",
        end="",
    )
    if figures:
        print(f", Chromium fetch + draw {figures['full_draw_ms']:8.0f} ms")
    else:
        print()
    peak_kib = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
    print(f"Peak resident memory of this process (server + benchmark): {peak_kib / 1024**2:.1f} GB")
    if args.no_pictures:
        return
    print("Run page pictures, each computed in a fresh process (peak RSS includes imports):")
    for name, fig in picture_figures(archive_dir, run_id).items():
        print(
            f"  {name:33s} {fig['wall_s']:6.1f} s wall {fig['cpu_s']:6.1f} s CPU  "
            f"peak {fig['peak_kib'] / 1024:6.0f} MiB (after imports {fig['start_kib'] / 1024:4.0f})"
            f"  {fig['json_bytes'] / 1e6:5.2f} MB JSON"
        )


if __name__ == "__main__":
    main()
