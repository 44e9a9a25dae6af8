"""Benchmark: lap detection and lap-by-lap comparison of two multi-lap runs.

Simulates two endurance runs of the invented ring (``analysis.demo.laps``,
about 104 m a lap): version A ``lean-ctl 1.4`` and version B ``lean-ctl 2.0``
whose target speeds fall 0.1 % a lap (a planted lap-time drift), both with
one disturbed lap. Each is stored in a scratch archive under ``bench-output/``
(git-ignored) from a Parquet file in canonical names, and analysed (the
analysis now finds the laps, their KPIs and drift). Then, in a fresh
interpreter, ``compare_archived`` compares them as ``outrigger compare A B``
does, and the time and peak memory (RSS) of that process are printed.

Targets (issue 17): two runs of 57 laps compare per segment with verdicts in
under 10 s and with a peak RSS of at most 1 GiB on a 2-core machine.

Run: ``.venv/bin/python benchmarks/bench_laps.py`` (8 laps each, about a
minute), ``--laps 57`` for the one-hour runs of the issue (a few minutes).
"""

from __future__ import annotations

import argparse
import json
import os
import resource
import shutil
import subprocess
import sys
import time
from pathlib import Path

import pyarrow as pa
import pyarrow.parquet as pq

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))

from analysis import catalogue as cat  # noqa: E402
from analysis.archive.store import Archive  # noqa: E402
from analysis.demo.laps import RING_NAME, simulate_laps  # noqa: E402
from analysis.demo.logs import demo_profile, profile_toml  # noqa: E402
from analysis.detect.pipeline import analyse_run  # noqa: E402
from analysis.ingest.stream import ingest_files  # noqa: E402
from analysis.laps import detect_laps  # noqa: E402

OUT = ROOT / "bench-output" / "laps"


def identity_map(columns: list[str]) -> str:
    """A channel map for a Parquet file already in canonical names and SI units."""
    lines = ["[[source]]", 'name = "state"', 'files = "run.parquet"', 'kind = "state"',
             'time_column = "t"', 'time_unit = "s"', 'time_origin = "boot"', "[source.columns]"]  # fmt: skip
    for c in columns:
        if c == cat.T:
            continue
        sig = cat.lookup(c, demo_profile().actuator_names)
        lines.append(f'"{c}" = {{ signal = "{c}", unit = "{sig.unit if sig else ""}" }}')
    return "\n".join(lines) + "\n"


def store(
    archive: Archive, folder: Path, controller: str, laps: int, seed: int, drift: float
) -> str:
    """Simulate, ingest and analyse one run; print what each step took."""
    t0 = time.perf_counter()
    run = simulate_laps(controller, laps=laps, seed=seed, disturbed_lap=max(1, laps // 3),
                        drift_per_lap=drift, state_rate_hz=200.0, torque_rate_hz=100.0)  # fmt: skip
    frame = run.run.frame
    frame = frame.drop(columns=[c for c in frame.columns if c.startswith(cat.EXTRA_PREFIX)])
    t1 = time.perf_counter()
    folder.mkdir(parents=True, exist_ok=True)
    pq.write_table(pa.Table.from_pandas(frame, preserve_index=False), folder / "run.parquet")
    (folder / "map.toml").write_text(identity_map(list(frame.columns)), encoding="utf-8")
    (folder / "profile.toml").write_text(profile_toml(), encoding="utf-8")
    outcome = ingest_files(
        archive, [folder / "run.parquet"], folder / "map.toml", folder / "profile.toml",
        name=f"ring {controller}", course=RING_NAME, controller=controller,
    )  # fmt: skip
    t2 = time.perf_counter()
    result = analyse_run(archive, outcome.run_id)
    t3 = time.perf_counter()
    detect_laps(frame)
    t4 = time.perf_counter()
    n = len(result.laps.get("laps", []))
    print(f"{controller}: {len(frame):,} samples, {float(frame[cat.T].iloc[-1]) / 60:.1f} min; "
          f"simulated {t1 - t0:.1f} s, ingested {t2 - t1:.1f} s, analysed {t3 - t2:.1f} s "
          f"(lap detection alone {t4 - t3:.2f} s); "
          f"laps: {result.laps.get('reason')} ({n} stored, truth {len(run.laps)})")  # fmt: skip
    drift = result.laps.get("drift", {})
    print("  drift: " + ", ".join(f"{k} {v['verdict']}" for k, v in drift.items()))
    return outcome.run_id


def peak_rss_mib() -> float:
    """Peak resident memory of this process image. [MiB]

    ``VmHWM`` of ``/proc/self/status`` (Linux): unlike ``getrusage``'s ``ru_maxrss``,
    which Linux carries over an ``exec`` from the forking parent, it counts only this
    interpreter.
    """
    status = Path("/proc/self/status")
    if status.is_file():
        for line in status.read_text().splitlines():
            if line.startswith("VmHWM:"):
                return float(line.split()[1]) / 1024  # kB
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024  # KiB on Linux


def child(root: str, a: str, b: str) -> None:
    """Compare two stored runs as ``outrigger compare`` does; print time and peak RSS."""
    from analysis.compare.compare import compare_archived

    t = time.perf_counter()
    cpu = time.process_time()
    comp, _, _ = compare_archived(Archive(root), [a], [b])
    seconds = time.perf_counter() - t
    cpu_s = time.process_time() - cpu
    load = os.getloadavg()[0]
    rss_mib = peak_rss_mib()
    rows = [r for rows in comp.segment_kpis.values() for r in rows]
    verdicts = {v: sum(r.verdict == v for r in comp.kpis) for v in ("better", "worse")}
    print(json.dumps({
        "seconds": seconds, "cpu_s": cpu_s, "load": load, "peak_rss_mib": rss_mib, "same_course": comp.same_course,
        "resampling": comp.settings["resampling"], "segments": len(comp.segments),
        "segment_rows": len(rows), "laps": {k: len(v["kpis"]) for k, v in (comp.laps or {}).get("runs", {}).items()},
        "overall_verdicts": verdicts, "refusal": comp.refusal,
    }))  # fmt: skip


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument(
        "--laps", type=int, default=8, help="laps per run (default 8; 57 = one hour)"
    )
    parser.add_argument("--child", nargs=3, help=argparse.SUPPRESS)
    args = parser.parse_args()
    if args.child:
        child(*args.child)
        return
    shutil.rmtree(OUT, ignore_errors=True)
    archive = Archive(OUT / "archive")
    a = store(archive, OUT / "in-a", "lean-ctl 1.4", args.laps, 61, 0.0)
    b = store(archive, OUT / "in-b", "lean-ctl 2.0", args.laps, 62, 0.001)
    cmd = [sys.executable, __file__, "--child", str(OUT / "archive"), a, b]
    done = subprocess.run(cmd, check=True, capture_output=True, text=True)
    r = json.loads(done.stdout.strip().splitlines()[-1])
    print(f"compare A B (fresh process): {r['seconds']:.2f} s wall, {r['cpu_s']:.2f} s CPU "
          f"(load average {r['load']:.1f} on {os.cpu_count()} cores), peak RSS {r['peak_rss_mib']:.0f} MiB; "
          f"{r['resampling']}; {r['segments']} segments ({r['segment_rows']} segment rows); "
          f"laps {r['laps']}; overall verdicts {r['overall_verdicts']}")  # fmt: skip
    if r["refusal"]:
        print(f"  refused per segment: {r['refusal']}")


if __name__ == "__main__":
    main()
