"""A small archive for the compare tests: demo runs of two controllers on one course, one elsewhere.

Runs are simulated by ``analysis.demo.logs``, written as the demo's foreign log files,
ingested and analysed the way an upload is, so the compare routes and page read
real stored runs.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

from analysis.archive.store import Archive
from analysis.demo import logs as demo
from analysis.detect.pipeline import analyse_run
from analysis.ingest.stream import ingest_files

#: Seconds of each demo run: enough for several curves, small enough to be fast.
SECONDS = 40.0


@dataclass
class CompareArchive:
    """The archive root and the ids of its runs."""

    root: Path
    a: str  # gullhaven-loop, lean-ctl 1.4
    b: str  # gullhaven-loop, lean-ctl 2.0
    hill: str  # gullhaven-hill, lean-ctl 1.4


def _store(
    archive: Archive, folder: Path, controller: str, seed: int, course: str, name: str
) -> str:
    folder.mkdir(parents=True, exist_ok=True)
    run = demo.simulate_run(
        controller, seed=seed, duration_s=SECONDS, course=course, name=f"run{seed}"
    )
    logs = []
    for file_name, table in demo.foreign_tables(run).items():
        path = folder / file_name
        path.write_bytes(demo.table_bytes(table))
        logs.append(path)
    map_path = folder / "map.toml"
    map_path.write_text(demo.channel_map_toml(), encoding="utf-8")
    profile_path = folder / "profile.toml"
    profile_path.write_text(demo.profile_toml(), encoding="utf-8")
    outcome = ingest_files(
        archive, sorted(logs), map_path, profile_path, name=name, course=course,
        controller=controller, tags=("compare-test",),
    )  # fmt: skip
    analyse_run(archive, outcome.run_id)
    return outcome.run_id


def stock(root: Path) -> CompareArchive:
    """Fill an archive under ``root`` with the three runs."""
    archive = Archive(root / "archive")
    a = _store(archive, root / "in-a", "lean-ctl 1.4", 31, "gullhaven-loop", "loop <b>old</b>")
    b = _store(archive, root / "in-b", "lean-ctl 2.0", 32, "gullhaven-loop", "loop new")
    hill = _store(archive, root / "in-h", "lean-ctl 1.4", 33, "gullhaven-hill", "hill old")
    return CompareArchive(root / "archive", a, b, hill)
