"""Benchmark: Outrigger's ingest against a bare pyarrow CSV-to-Parquet conversion.

Generates a 400 Hz, 30-channel CSV (one hour by default; ``--minutes N`` for a
smaller run) into ``bench-output/`` (git-ignored), then times, each in its own
child process so that each peak RSS is its own:

* ``baseline``: pyarrow's streaming CSV reader into a zstd Parquet file with
  ~1M-row row groups, no unit conversion or checks;
* ``ingest``: :func:`analysis.ingest.stream.ingest_files` into a fresh archive.

Prints rows/s, MB/s, peak RSS and the ratio ingest time / baseline time.
Targets: ratio <= 1.5 and peak RSS <= 1 GiB.

Run: ``.venv/bin/python benchmarks/bench_ingest.py [--minutes N]``.
"""

from __future__ import annotations

import argparse
import json
import resource
import shutil
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pyarrow as pa
import pyarrow.csv as pacsv
import pyarrow.parquet as pq

ROOT = Path(__file__).resolve().parent.parent
RATE_HZ = 400
ROW_GROUP_ROWS = 1 << 20

PROFILE = """
[robot]
name = "Marram-2"
wheel_radius_m = 0.09
track_width_m = 0.42
mass_kg = 16.5
wheel_encoder_reference = "leg"
[com]
model = "constant"
height_m = 0.40
[actuators.wheel_l]
role = "wheel"
side = "left"
peak_torque_nm = 8.0
continuous_torque_nm = 3.0
[actuators.wheel_r]
role = "wheel"
side = "right"
peak_torque_nm = 8.0
continuous_torque_nm = 3.0
[actuators.hip_l]
role = "hip"
side = "left"
peak_torque_nm = 30.0
continuous_torque_nm = 12.0
[actuators.hip_r]
role = "hip"
side = "right"
peak_torque_nm = 30.0
continuous_torque_nm = 12.0
"""

# 30 channels: raw name, canonical signal, unit in the log.
CHANNELS = [
    ("imu_roll_deg", "roll", "deg"),
    ("imu_pitch_deg", "pitch", "deg"),
    ("imu_yaw_deg", "yaw", "deg"),
    ("gyro_x_dps", "roll_rate", "deg/s"),
    ("gyro_y_dps", "pitch_rate", "deg/s"),
    ("gyro_z_dps", "yaw_rate", "deg/s"),
    ("acc_x_g", "accel_x", "g0"),
    ("acc_y_g", "accel_y", "g0"),
    ("acc_z_g", "accel_z", "g0"),
    ("est_vx", "vel_x", "m/s"),
    ("est_vy", "vel_y", "m/s"),
    ("leg_l_mm", "leg_l.length", "mm"),
    ("leg_r_mm", "leg_r.length", "mm"),
    ("ref_roll_deg", "roll_ref", "deg"),
    ("ref_pitch_deg", "pitch_ref", "deg"),
    ("ref_height_mm", "height_ref", "mm"),
    ("ref_vx", "vel_x_ref", "m/s"),
    ("ref_yaw_rate_dps", "yaw_rate_ref", "deg/s"),
]
for side in ("l", "r"):
    CHANNELS += [
        (f"whl_{side}_rpm", f"wheel_{side}.vel", "rpm"),
        (f"whl_{side}_pos_deg", f"wheel_{side}.pos", "deg"),
        (f"whl_{side}_tq_req", f"wheel_{side}.torque_req", "N*m"),
        (f"whl_{side}_tq_cmd", f"wheel_{side}.torque_cmd", "N*m"),
        (f"hip_{side}_pos_deg", f"hip_{side}.pos", "deg"),
        (f"hip_{side}_tq_cmd", f"hip_{side}.torque_cmd", "N*m"),
    ]


def _channel_map() -> str:
    lines = [
        "[[source]]",
        'name = "state"',
        'files = "*.csv"',
        'kind = "state"',
        'time_column = "stamp_us"',
        'time_unit = "us"',
        'time_origin = "epoch"',
        "[source.columns]",
    ]
    lines += [f'{raw} = {{ signal = "{sig}", unit = "{unit}" }}' for raw, sig, unit in CHANNELS]
    return "\n".join(lines) + "\n"


def generate(path: Path, minutes: float) -> int:
    """Write the benchmark CSV in slices; return its number of rows."""
    n = int(minutes * 60 * RATE_HZ)
    rng = np.random.default_rng(7)
    start_us = 1_795_858_260_000_000  # 2026-11-28T09:31:00Z
    step = 200_000
    with path.open("wb") as fh:
        for k, lo in enumerate(range(0, n, step)):
            hi = min(n, lo + step)
            i = np.arange(lo, hi)
            cols: dict[str, pa.Array] = {"stamp_us": pa.array(start_us + i * 2500)}
            for j, (raw, _, _) in enumerate(CHANNELS):
                x = np.sin(i / (50.0 + 7 * j)) * (1 + j) + rng.normal(0, 0.01, len(i))
                cols[raw] = pa.array(np.round(x, 4))
            opts = pacsv.WriteOptions(include_header=k == 0)
            pacsv.write_csv(pa.table(cols), fh, write_options=opts)
    return n


def child_baseline(csv: Path, out: Path, float_dictionary: bool = True) -> None:
    """Bare streaming CSV -> Parquet (zstd, ~1M-row row groups).

    With ``float_dictionary=False`` the writer settings match the ingest's
    (dictionary encoding only for non-float columns).
    """

    def open_writer(schema: pa.Schema) -> pq.ParquetWriter:
        dictionary: bool | list[str] = float_dictionary or [
            f.name for f in schema if not pa.types.is_floating(f.type)
        ]
        return pq.ParquetWriter(out, schema, compression="zstd", use_dictionary=dictionary)

    reader = pacsv.open_csv(csv, read_options=pacsv.ReadOptions(block_size=8 << 20))
    writer = None
    pending: list[pa.RecordBatch] = []
    rows = 0
    for batch in reader:
        pending.append(batch)
        rows += batch.num_rows
        if rows >= ROW_GROUP_ROWS:
            if writer is None:
                writer = open_writer(batch.schema)
            writer.write_table(pa.Table.from_batches(pending), row_group_size=ROW_GROUP_ROWS)
            pending, rows = [], 0
    if pending:
        if writer is None:
            writer = open_writer(pending[0].schema)
        writer.write_table(pa.Table.from_batches(pending), row_group_size=ROW_GROUP_ROWS)
    if writer is not None:
        writer.close()


def child_ingest(csv: Path, out: Path) -> None:
    """Outrigger's ingest of the same file into a fresh archive."""
    from analysis.archive.store import Archive  # imported before the clock starts (see main)
    from analysis.ingest.stream import ingest_files

    (out.parent / "bench_map.toml").write_text(_channel_map())
    (out.parent / "bench_profile.toml").write_text(PROFILE)
    outcome = ingest_files(
        Archive(out),
        [csv],
        out.parent / "bench_map.toml",
        out.parent / "bench_profile.toml",
        name="benchmark",
    )
    if outcome.report["state"]["skipped_lines"]["count"]:
        raise SystemExit("benchmark file had skipped lines: the generator is broken")


def run_child(kind: str, csv: Path, out: Path) -> dict[str, float]:
    """Run one measurement in a fresh interpreter; return seconds and peak RSS."""
    cmd = [sys.executable, __file__, "--child", kind, str(csv), str(out)]
    done = subprocess.run(cmd, check=True, capture_output=True, text=True)
    return dict(json.loads(done.stdout.strip().splitlines()[-1]))


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--minutes", type=float, default=60.0, help="log length (default 60)")
    parser.add_argument("--out", default=str(ROOT / "bench-output"), help="work folder")
    parser.add_argument("--child", nargs=3, help=argparse.SUPPRESS)
    args = parser.parse_args()
    if args.child:
        kind, csv, out = args.child
        if kind == "ingest":  # module imports are not part of the measured conversion
            sys.path.insert(0, str(ROOT))
            import analysis.archive.store  # noqa: F401
            import analysis.ingest.stream  # noqa: F401
        t = time.perf_counter()
        run = {
            "baseline": child_baseline,
            "baseline_same_writer": lambda c, o: child_baseline(c, o, float_dictionary=False),
            "ingest": child_ingest,
        }[kind]
        run(Path(csv), Path(out))
        seconds = time.perf_counter() - t
        rss_kib = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss  # KiB on Linux
        print(json.dumps({"seconds": seconds, "peak_rss_mib": rss_kib / 1024}))
        return
    work = Path(args.out)
    work.mkdir(parents=True, exist_ok=True)
    csv = work / "bench_state.csv"
    t = time.perf_counter()
    rows = generate(csv, args.minutes)
    mb = csv.stat().st_size / 1e6
    print(f"generated {rows:,} rows x {len(CHANNELS)} channels, {mb:.0f} MB "
          f"in {time.perf_counter() - t:.1f} s: {csv}")  # fmt: skip
    shutil.rmtree(work / "archive", ignore_errors=True)
    base = run_child("baseline", csv, work / "baseline.parquet")
    same = run_child("baseline_same_writer", csv, work / "baseline_same.parquet")
    ing = run_child("ingest", csv, work / "archive")
    for label, r in (
        ("pyarrow CSV->Parquet", base),
        ("  same, no float dict", same),
        ("outrigger ingest", ing),
    ):
        print(
            f"{label:22s} {r['seconds']:7.2f} s  {rows / r['seconds']:>11,.0f} rows/s  "
            f"{mb / r['seconds']:6.1f} MB/s  peak RSS {r['peak_rss_mib']:6.0f} MiB"
        )
    ratio = ing["seconds"] / base["seconds"]
    print(f"ratio ingest / baseline: {ratio:.2f} (target <= 1.5)")
    print(f"ratio ingest / baseline with the ingest's writer settings: "
          f"{ing['seconds'] / same['seconds']:.2f}")  # fmt: skip
    print(f"ingest peak RSS: {ing['peak_rss_mib']:.0f} MiB (target <= 1024 MiB)")


if __name__ == "__main__":
    main()
