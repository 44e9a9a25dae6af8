"""An archive with two small multi-lap demo runs (ingested and analysed as an upload is).

Baseline ``lean-ctl 1.4`` and candidate ``lean-ctl 2.0``, 8 laps of the ring each at
100 Hz; the candidate's target speeds fall 1.5 % a lap (a planted lap-time drift).
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

from analysis.archive.store import Archive
from analysis.demo import logs as demo
from analysis.demo.laps import RING_NAME, simulate_laps
from analysis.detect.pipeline import analyse_run
from analysis.ingest.stream import ingest_files


@dataclass
class LapArchive:
    """The archive root and its two run ids."""

    root: Path
    a: str
    b: str


def store_lap_run(archive: Archive, folder: Path, controller: str, seed: int, drift: float) -> str:
    """Simulate 8 laps of the ring, ingest them from the demo's log files and analyse; return the id."""
    folder.mkdir(parents=True, exist_ok=True)
    run = simulate_laps(
        controller, laps=8, seed=seed, drift_per_lap=drift, state_rate_hz=100.0,
        torque_rate_hz=50.0, name=f"ring{seed}",
    )  # fmt: skip
    logs = []
    for file_name, table in demo.foreign_tables(run.run).items():
        path = folder / file_name
        path.write_bytes(demo.table_bytes(table))
        logs.append(path)
    map_path = folder / "map.toml"
    map_path.write_text(demo.channel_map_toml(), encoding="utf-8")
    profile_path = folder / "profile.toml"
    profile_path.write_text(demo.profile_toml(), encoding="utf-8")
    outcome = ingest_files(
        archive, sorted(logs), map_path, profile_path, name=f"ring {controller}",
        course=RING_NAME, controller=controller, tags=("lap-test",),
    )  # fmt: skip
    analyse_run(archive, outcome.run_id)
    return outcome.run_id


def stock_laps(root: Path) -> LapArchive:
    """Fill an archive under ``root`` with the two multi-lap runs."""
    archive = Archive(root / "archive")
    a = store_lap_run(archive, root / "in-a", "lean-ctl 1.4", 51, 0.0)
    b = store_lap_run(archive, root / "in-b", "lean-ctl 2.0", 52, 0.015)
    return LapArchive(root / "archive", a, b)
