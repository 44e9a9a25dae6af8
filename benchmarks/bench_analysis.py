"""Benchmark: every detector on a one-hour, 400 Hz run against reading its Parquet.

Builds a one-hour run by repeating a simulated demo lap of the invented robot
(``analysis.demo.logs``) at 400 Hz, ingests it into a scratch archive under
``bench-output/`` (git-ignored), then, in this one process:

* times ``Archive.load_frame`` (reading the run's Parquet into the analysis frame),
* times each detector on that frame, and the whole ``analyse_frame``,

and prints the time per detector and the ratio analysis / Parquet read.
Target (analysis issue): whole analysis under 10x the Parquet read.

Run: ``.venv/bin/python benchmarks/bench_analysis.py [--minutes N]``.
"""

from __future__ import annotations

import argparse
import resource
import shutil
import time
from pathlib import Path

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq

from analysis import catalogue as cat
from analysis.archive.store import Archive
from analysis.demo.logs import demo_profile, profile_toml, simulate_run
from analysis.detect.pipeline import DETECTORS, analyse_frame
from analysis.ingest.stream import ingest_files

ROOT = Path(__file__).resolve().parent.parent
OUT = ROOT / "bench-output" / "analysis"
RATE_HZ = 400.0


def build_frame(minutes: float) -> pd.DataFrame:
    """Repeat one simulated lap (400 Hz) until the run lasts ``minutes``."""
    lap = simulate_run("lean-ctl 1.4", seed=7, state_rate_hz=RATE_HZ, torque_rate_hz=RATE_HZ).frame
    lap = lap.drop(columns=[c for c in lap.columns if c.startswith(cat.EXTRA_PREFIX)])
    period = float(lap[cat.T].iloc[-1]) + 1.0 / RATE_HZ
    copies = int(np.ceil(minutes * 60.0 / period))
    t = np.concatenate([lap[cat.T].to_numpy() + k * period for k in range(copies)])
    frame = pd.concat([lap.drop(columns=[cat.T])] * copies, ignore_index=True)
    frame.insert(0, cat.T, t)
    return frame[frame[cat.T] < minutes * 60.0].reset_index(drop=True)


def identity_map(columns: list[str]) -> str:
    """A channel map for a Parquet file already in canonical names and SI units."""
    lines = [
        "[[source]]",
        'name = "state"',
        'files = "run.parquet"',
        'kind = "state"',
        'time_column = "t"',
        'time_unit = "s"',
        'time_origin = "boot"',
        "[source.columns]",
    ]
    for c in columns:
        if c == cat.T:
            continue
        unit = cat.lookup(c, demo_profile().actuator_names)
        lines.append(f'"{c}" = {{ signal = "{c}", unit = "{unit.unit if unit else ""}" }}')
    return "\n".join(lines) + "\n"


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--minutes", type=float, default=60.0, help="run length (default 60)")
    args = parser.parse_args()

    shutil.rmtree(OUT, ignore_errors=True)
    OUT.mkdir(parents=True)
    t0 = time.perf_counter()
    frame = build_frame(args.minutes)
    src = OUT / "run.parquet"
    pq.write_table(pa.Table.from_pandas(frame, preserve_index=False), src, compression="zstd")
    (OUT / "map.toml").write_text(identity_map(list(frame.columns)))
    (OUT / "profile.toml").write_text(profile_toml())
    archive = Archive(OUT / "archive")
    run_id = ingest_files(archive, [src], OUT / "map.toml", OUT / "profile.toml").run_id
    rows, cols = frame.shape
    del frame
    print(
        f"run: {rows:,} rows x {cols} columns at {RATE_HZ:g} Hz ({args.minutes:g} min); "
        f"prepared in {time.perf_counter() - t0:.1f} s"
    )

    t0 = time.perf_counter()
    loaded = archive.load_frame(run_id)
    read_s = time.perf_counter() - t0
    profile = archive.load_profile(run_id)
    print(f"{'read Parquet (load_frame)':32s} {read_s:8.3f} s")

    total_detectors = 0.0
    for name, detect in DETECTORS:
        t0 = time.perf_counter()
        detect(loaded, profile, None)
        dt = time.perf_counter() - t0
        total_detectors += dt
        print(f"{'  detector ' + name:32s} {dt:8.3f} s")
    # A fresh copy: the detectors above left this frame's specific force computed
    # (tip and roll share it within one analysis), which would flatter the whole run.
    fresh = loaded.copy()
    t0 = time.perf_counter()
    analyse_frame(fresh, profile)
    whole_s = time.perf_counter() - t0
    peak_mb = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
    print(f"{'whole analyse_frame':32s} {whole_s:8.3f} s")
    print(f"ratio analysis / Parquet read: {whole_s / read_s:.1f}  (target < 10)")
    print(f"peak RSS of this process: {peak_mb:.0f} MB")


if __name__ == "__main__":
    main()
