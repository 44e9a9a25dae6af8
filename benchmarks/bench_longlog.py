"""Benchmark: ingest and analysis of long demo logs against simple references.

Writes a one-hour demo log (and with ``--eight-hours`` also an eight-hour one)
in the demo generator's foreign layout: a 400 Hz state CSV (22 mapped columns
plus 2 unmapped) and a 200 Hz torque CSV (12 columns), by repeating simulated
laps of the invented robot (``analysis.demo.logs.simulate_run``, with its
sensor noise) with running time stamps. Then, for each log, each step in its
own child process (so that each peak RSS is its own) and each pair in the
same run of this script:

* ``ingest``: ``ingest_files`` into a fresh archive, no analysis;
  reference: pyarrow's streaming CSV reader (64 MiB blocks) into zstd Parquet,
  both files, no conversion or checks;
* ``analyse``: ``analyse_run`` on the ingested run (events, KPIs, series,
  overview, all stored); reference: reading both stored Parquet streams into
  pandas.

Prints wall time, CPU time (user + system of the child, and the system part) and peak RSS of each,
and the ratios ingest / reference and analyse / reference (wall and CPU).
Goals (issue 12): ingest <= 1.2x, analysis <= 5x, peak RSS <= 1 GiB.

Run: ``.venv/bin/python benchmarks/bench_longlog.py [--eight-hours] [--minutes N]
[--keep] [--steps a,b] [--repeat N]`` (``--minutes`` replaces the one-hour log by a
shorter one, for a quick check; ``--keep`` keeps the logs and archives, so that the next
run skips writing the logs; ``--steps`` runs some of the four steps, ``analyse`` needing
an ingest kept from an earlier run; ``--repeat`` runs every step N times, in rounds, and
shows medians; each timed run follows an untimed run of the same step, see ``measure``,
and ``--cold`` leaves that out).
Files go to ``bench-output/longlog/`` (git-ignored); the 8-hour CSVs take about
2.5 GB of disk.
"""

from __future__ import annotations

import argparse
import json
import resource
import shutil
import statistics
import subprocess
import sys
import time
from pathlib import Path
from typing import Any

ROOT = Path(__file__).resolve().parent.parent
STATE_HZ, TORQUE_HZ = 400.0, 200.0
BLOCK = 64 << 20  # reference CSV block size [B]
ROW_GROUP_ROWS = 1 << 20


# --- the logs -------------------------------------------------------------------------


def write_logs(folder: Path, hours: float) -> tuple[Path, Path, int]:
    """Write ``long_state.csv`` and ``long_torque.csv`` lasting ``hours``; return paths, rows."""
    import numpy as np
    import pyarrow as pa
    import pyarrow.csv as pacsv

    from analysis.demo.logs import simulate_run

    laps = [
        simulate_run(ctl, seed=seed, state_rate_hz=STATE_HZ, torque_rate_hz=TORQUE_HZ).raw
        for ctl, seed in (("lean-ctl 1.4", 11), ("lean-ctl 2.0", 12), ("lean-ctl 1.4", 13))
    ]
    state_path, torque_path = folder / "long_state.csv", folder / "long_torque.csv"
    end_us = int(hours * 3600 * 1e6)
    rows = 0
    offset = 0
    first_us = int(laps[0]["state"]["stamp_us"].iloc[0])
    with state_path.open("wb") as fs, torque_path.open("wb") as ft:
        k = 0
        while offset < end_us:
            lap = laps[k % len(laps)]
            st, tq = lap["state"], lap["torque"]
            shift = first_us + offset - int(st["stamp_us"].iloc[0])
            st = st.assign(stamp_us=st["stamp_us"].to_numpy() + shift)
            tq = tq.assign(t_us=tq["t_us"].to_numpy() + shift)
            st = st[st["stamp_us"].to_numpy() - first_us < end_us]
            tq = tq[tq["t_us"].to_numpy() - first_us < end_us]
            for table, fh in ((st, fs), (tq, ft)):
                opts = pacsv.WriteOptions(include_header=k == 0)
                pacsv.write_csv(pa.Table.from_pandas(table, preserve_index=False), fh, opts)
            rows += len(st)
            period = int(np.median(np.diff(lap["state"]["stamp_us"].to_numpy())))
            offset += int(lap["state"]["stamp_us"].iloc[-1] - lap["state"]["stamp_us"].iloc[0])
            offset += period
            k += 1
    return state_path, torque_path, rows


def write_configs(folder: Path) -> tuple[Path, Path]:
    from analysis.demo.logs import channel_map_toml, profile_toml

    (folder / "map.toml").write_text(channel_map_toml())
    (folder / "profile.toml").write_text(profile_toml())
    return folder / "map.toml", folder / "profile.toml"


# --- the measured steps (each in a child process) --------------------------------------


def step_ingest_reference(work: Path) -> None:
    """Bare streaming CSV -> zstd Parquet of both files, 64 MiB blocks."""
    import pyarrow as pa
    import pyarrow.csv as pacsv
    import pyarrow.parquet as pq

    for name in ("long_state", "long_torque"):
        reader = pacsv.open_csv(
            work / f"{name}.csv", read_options=pacsv.ReadOptions(block_size=BLOCK)
        )
        writer = None
        pending: list[pa.RecordBatch] = []
        rows = 0
        for batch in reader:
            pending.append(batch)
            rows += batch.num_rows
            if rows >= ROW_GROUP_ROWS:
                if writer is None:
                    writer = pq.ParquetWriter(work / f"ref_{name}.parquet", batch.schema,
                                              compression="zstd")  # fmt: skip
                writer.write_table(pa.Table.from_batches(pending), row_group_size=ROW_GROUP_ROWS)
                pending, rows = [], 0
        if pending:
            if writer is None:
                writer = pq.ParquetWriter(work / f"ref_{name}.parquet", pending[0].schema,
                                          compression="zstd")  # fmt: skip
            writer.write_table(pa.Table.from_batches(pending), row_group_size=ROW_GROUP_ROWS)
        if writer is not None:
            writer.close()


def step_ingest(work: Path) -> None:
    from analysis.archive.store import Archive
    from analysis.ingest.stream import ingest_files

    outcome = ingest_files(
        Archive(work / "archive"),
        [work / "long_state.csv", work / "long_torque.csv"],
        work / "map.toml",
        work / "profile.toml",
        name="long log",
    )
    (work / "run_id").write_text(outcome.run_id)


def step_analyse_reference(work: Path) -> None:
    import pyarrow.parquet as pq

    for path in sorted((work / "archive").glob("runs/*/streams/*.parquet")):
        frame = pq.read_table(path).to_pandas()
        del frame


def step_analyse(work: Path) -> None:
    from analysis.archive.store import Archive
    from analysis.detect.pipeline import analyse_run

    archive = Archive(work / "archive")
    analyse_run(archive, (work / "run_id").read_text())


STEPS = {
    "ingest_reference": step_ingest_reference,
    "ingest": step_ingest,
    "analyse_reference": step_analyse_reference,
    "analyse": step_analyse,
}


def child(kind: str, work: Path) -> None:
    """Run one step; print wall, CPU seconds and peak RSS as JSON."""
    sys.path.insert(0, str(ROOT))
    # Imports are not part of the measured work; a reference imports only pyarrow (and
    # pandas), so that its peak RSS is that of the bare conversion.
    import pandas  # noqa: F401
    import pyarrow.csv  # noqa: F401
    import pyarrow.parquet  # noqa: F401

    if not kind.endswith("reference"):
        import analysis.archive.store  # noqa: F401
        import analysis.detect.pipeline  # noqa: F401
        import analysis.ingest.stream  # noqa: F401

    before = resource.getrusage(resource.RUSAGE_SELF)
    wall = time.perf_counter()
    STEPS[kind](work)
    wall = time.perf_counter() - wall
    after = resource.getrusage(resource.RUSAGE_SELF)
    user, system = after.ru_utime - before.ru_utime, after.ru_stime - before.ru_stime
    rss_mib = after.ru_maxrss / 1024  # KiB on Linux
    print(
        json.dumps(
            {"wall_s": wall, "cpu_s": user + system, "sys_s": system, "peak_rss_mib": rss_mib}
        )
    )


def measure(kind: str, work: Path, warm: bool = True) -> dict[str, float]:
    """One timed run of a step in a child process, after an untimed one when ``warm``.

    The untimed run first: on this machine (a virtual machine) the memory a process
    touches first costs from 0.15 to 1.5 s of system time per GiB, depending on what
    ran before: little when a process just let go of as much (the reference read took
    0.18 s after itself, 0.30 s after the analysis and 0.5 to 0.9 s after an ingest,
    same page faults). Timing each step right after itself starts every step from
    the same state, instead of favouring the step that follows a large one.
    """
    if warm:
        _run(kind, work)
    return _run(kind, work)


def _run(kind: str, work: Path) -> dict[str, float]:
    if kind == "ingest":  # a fresh archive (a kept one would refuse the same files again)
        shutil.rmtree(work / "archive", ignore_errors=True)
    cmd = [sys.executable, __file__, "--child", kind, str(work)]
    done = subprocess.run(cmd, check=True, capture_output=True, text=True)
    return dict(json.loads(done.stdout.strip().splitlines()[-1]))


def bench_log(
    work: Path,
    hours: float,
    label: str,
    keep: bool = False,
    steps: list[str] | None = None,
    repeat: int = 3,
    warm: bool = True,
) -> dict[str, object]:
    sys.path.insert(0, str(ROOT))
    t = time.perf_counter()
    written = work / "rows.txt"
    if keep and written.exists() and float(written.read_text().split()[1]) == hours:
        state, torque = work / "long_state.csv", work / "long_torque.csv"
        rows = int(written.read_text().split()[0])
    else:
        shutil.rmtree(work, ignore_errors=True)
        work.mkdir(parents=True)
        state, torque, rows = write_logs(work, hours)
        written.write_text(f"{rows} {hours}")
    write_configs(work)
    mb = (state.stat().st_size + torque.stat().st_size) / 1e6
    print(f"\n== {label}: {rows:,} state rows, CSV {mb:,.0f} MB, written in "
          f"{time.perf_counter() - t:.0f} s")  # fmt: skip
    runs: dict[str, list[dict[str, float]]] = {name: [] for name in steps or STEPS}
    for _ in range(repeat):  # rounds of every step, so a pair shares the machine's load
        for name in runs:
            runs[name].append(measure(name, work, warm))
    res: dict[str, dict[str, Any]] = {
        name: {
            "wall_s": statistics.median(r["wall_s"] for r in rs),
            "cpu_s": statistics.median(r["cpu_s"] for r in rs),
            "sys_s": statistics.median(r["sys_s"] for r in rs),
            "peak_rss_mib": max(r["peak_rss_mib"] for r in rs),
            "wall_all_s": [round(r["wall_s"], 3) for r in rs],
        }
        for name, rs in runs.items()
    }
    print(
        f"medians of {repeat} run(s), each "
        + ("after an untimed run of the same step" if warm else "without a run before it")
        + "; peak RSS: the largest"
    )
    print(
        f"{'step':20s} {'wall s':>8s} {'CPU s':>8s} {'of it sys':>10s} {'peak RSS MiB':>13s}  each wall s"
    )
    for name, r in res.items():
        each = " ".join(f"{w:.2f}" for w in r["wall_all_s"])
        print(
            f"{name:20s} {r['wall_s']:8.2f} {r['cpu_s']:8.2f} {r['sys_s']:10.2f} "
            f"{r['peak_rss_mib']:13.0f}  {each}"
        )
    out: dict[str, object] = {
        "label": label,
        "hours": hours,
        "rows": rows,
        "csv_mb": mb,
        "warm": warm,
        **res,
    }
    for step, goal in (("ingest", 1.2), ("analyse", 5.0)):
        if step not in res or f"{step}_reference" not in res:
            continue
        ref = res[f"{step}_reference"]
        wall = res[step]["wall_s"] / ref["wall_s"]
        cpu = res[step]["cpu_s"] / ref["cpu_s"]
        out[f"{step}_ratio_wall"], out[f"{step}_ratio_cpu"] = wall, cpu
        print(f"ratio {step} / reference: {wall:.2f} wall, {cpu:.2f} CPU (goal <= {goal:g})")
    for p in work.glob("ref_*.parquet"):
        p.unlink()
    if not keep:
        shutil.rmtree(work / "archive", ignore_errors=True)
        for p in work.glob("*.csv"):
            p.unlink()
        written.unlink()
    return out


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--eight-hours", action="store_true", help="also the 8-hour log")
    parser.add_argument("--minutes", type=float, help="a shorter first log instead of one hour")
    parser.add_argument("--out", default=str(ROOT / "bench-output" / "longlog"))
    parser.add_argument(
        "--keep",
        action="store_true",
        help="keep the logs and the archive for the next run (which then reuses the logs)",
    )
    parser.add_argument(
        "--steps",
        help=f"comma-separated subset of {','.join(STEPS)} (analyse needs an earlier ingest)",
    )
    parser.add_argument(
        "--repeat", type=int, default=3, help="runs of each step; medians are shown (3)"
    )
    parser.add_argument(
        "--cold",
        action="store_true",
        help="time each step without an untimed run of it just before (see measure)",
    )
    parser.add_argument("--child", nargs=2, help=argparse.SUPPRESS)
    args = parser.parse_args()
    if args.child:
        child(args.child[0], Path(args.child[1]))
        return
    out = Path(args.out)
    hours = args.minutes / 60.0 if args.minutes else 1.0
    steps = args.steps.split(",") if args.steps else None
    first = f"{hours * 60:g}-minute log"
    warm = not args.cold
    results = [bench_log(out / "first", hours, first, args.keep, steps, args.repeat, warm)]
    if args.eight_hours:
        results.append(
            bench_log(out / "eight", 8.0, "8-hour log", args.keep, steps, args.repeat, warm)
        )
    (out / "results.json").write_text(json.dumps(results, indent=1))
    print(f"\nfigures saved to {out / 'results.json'}")


if __name__ == "__main__":
    main()
