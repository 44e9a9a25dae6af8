"""Fixtures and helpers of the dashboard tests: a temporary archive with real, small runs.

``conftest.py`` here re-exports the fixtures; the browser tests import the
helpers too.

Session-scoped so the suite ingests and analyses each run once:

- a demo run of Marram-2 on the gullhaven-loop, made by ``analysis.demo.logs`` and
  written to files in the foreign log format the demo channel map reads;
- a "planted" run: 30 s at 100 Hz of smooth signals with one single-sample
  torque spike and a 1 s hole in the time stamps, so the tests know exactly
  what the charts must keep.

Tests that change the archive (upload, edit, delete) build their own app over a
fresh archive with :func:`fresh_app`.
"""

from __future__ import annotations

import time
from collections.abc import Iterator
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
import pytest
from fastapi.testclient import TestClient

from analysis.archive.store import Archive
from analysis.detect.pipeline import analyse_run
from analysis.ingest.stream import ingest_files
from server.app import create_app

#: Planted run: sample rate [Hz], length [s], spike sample and value, hole in the stamps.
PLANT_RATE_HZ = 100.0
PLANT_SECONDS = 30.0
SPIKE_INDEX = 1234
SPIKE_NM = 2.875
HOLE = (2000, 2100)  # rows removed: t = 20.00 .. 20.99 s
#: Demo run length: None drives the whole gullhaven-loop (about 90 s, 200 Hz state log),
#: which holds saturation, slip and roll-tracking events.
DEMO_SECONDS: float | None = None

PLANT_UNITS = {
    "roll": "rad",
    "roll_ref": "rad",
    "pitch": "rad",
    "roll_rate": "rad/s",
    "pitch_rate": "rad/s",
    "yaw_rate": "rad/s",
    "accel_x": "m/s**2",
    "accel_y": "m/s**2",
    "accel_z": "m/s**2",
    "vel_x": "m/s",
    "leg_l.length": "m",
    "leg_r.length": "m",
}


#: Rows per row group of the run streams in the ``grouped`` archive (stored streams
#: have 131,072): many row groups in a short run, for reading it in windows. [-]
GROUP_ROWS = 1000


@dataclass
class RunInputs:
    """Log files, channel map and profile of one run, on disk."""

    logs: list[Path]
    map_path: Path
    profile_path: Path


def write_demo_inputs(folder: Path, duration_s: float | None = DEMO_SECONDS) -> RunInputs:
    """Simulate a short demo run and write it as the demo's foreign log files."""
    from analysis.demo import logs as demo

    folder.mkdir(parents=True, exist_ok=True)
    run = demo.simulate_run(duration_s=duration_s)
    logs = []
    for name, table in demo.foreign_tables(run).items():
        path = folder / name
        path.write_bytes(demo.table_bytes(table))
        logs.append(path)
    map_path = folder / "marram2-map.toml"
    map_path.write_text(demo.channel_map_toml(), encoding="utf-8")
    profile_path = folder / "marram2-profile.toml"
    profile_path.write_text(demo.profile_toml(), encoding="utf-8")
    return RunInputs(sorted(logs), map_path, profile_path)


def write_planted_inputs(folder: Path) -> RunInputs:
    """A small run whose exact samples the tests know (spike, hole); demo robot profile."""
    from analysis.demo import course as demo_course

    folder.mkdir(parents=True, exist_ok=True)
    n = int(PLANT_SECONDS * PLANT_RATE_HZ)
    t = np.arange(n) / PLANT_RATE_HZ
    cols: dict[str, np.ndarray] = {
        "stamp_s": 1.9e9 + t,
        "roll": 0.05 * np.sin(0.5 * t),
        "roll_ref": 0.05 * np.sin(0.5 * t - 0.1),
        "pitch": 0.02 * np.sin(2 * t),
        "roll_rate": 0.025 * np.cos(0.5 * t),
        "pitch_rate": 0.04 * np.cos(2 * t),
        "yaw_rate": 0.3 * np.sin(0.2 * t),
        "accel_x": np.full(n, 0.1),
        "accel_y": 0.5 * np.sin(0.5 * t),
        "accel_z": np.full(n, 9.81),
        "vel_x": 1.0 + 0.2 * np.sin(0.1 * t),
        "leg_l.length": np.full(n, 0.3),
        "leg_r.length": np.full(n, 0.3),
    }
    for i, actuator in enumerate(("wheel_l", "wheel_r", "hip_l", "hip_r")):
        request = 2.0 * np.sin(t + i)
        limit = 1.5 if actuator.startswith("wheel") else 16.0
        cols[f"{actuator}.torque_req"] = request
        cols[f"{actuator}.torque_cmd"] = np.clip(request, -limit, limit)
        cols[f"{actuator}.vel"] = np.full(n, 10.0) if actuator.startswith("wheel") else 0.1 * t
    cols["wheel_l.torque_cmd"][SPIKE_INDEX] = SPIKE_NM
    frame = pd.DataFrame(cols).drop(index=range(*HOLE))
    log = folder / "plant_state.csv"
    frame.to_csv(log, index=False)
    lines = [
        "[[source]]",
        'name = "state"',
        'files = "*_state.csv"',
        'kind = "state"',
        'time_column = "stamp_s"',
        'time_unit = "s"',
        'time_origin = "epoch"',
        "",
        "[source.columns]",
    ]
    for col in cols:
        if col == "stamp_s":
            continue
        unit = PLANT_UNITS.get(col) or ("N*m" if "torque" in col else "rad/s")
        lines.append(f'"{col}" = {{ signal = "{col}", unit = "{unit}" }}')
    map_path = folder / "plant-map.toml"
    map_path.write_text("\n".join(lines) + "\n", encoding="utf-8")
    profile_path = folder / "plant-profile.toml"
    profile_path.write_text(demo_course.profile_toml(), encoding="utf-8")
    return RunInputs([log], map_path, profile_path)


#: What a spied :meth:`Archive.load_frame` was asked: (columns, t0, t1) per call.
Reads = list[tuple[list[str] | None, float | None, float | None]]


def spy_load_frame(monkeypatch: pytest.MonkeyPatch) -> Reads:
    """Record every :meth:`Archive.load_frame` call's columns and window from now on."""
    reads: Reads = []
    load_frame = Archive.load_frame

    def spy(self, run_id, columns=None, t0=None, t1=None, **kwargs):  # noqa: ANN001, ANN202
        reads.append((columns, t0, t1))
        return load_frame(self, run_id, columns, t0, t1, **kwargs)

    monkeypatch.setattr(Archive, "load_frame", spy)
    return reads


def ingest_and_analyse(archive: Archive, inputs: RunInputs, **meta: Any) -> str:
    """Store and analyse one run the way the upload job does; return its id."""
    outcome = ingest_files(archive, inputs.logs, inputs.map_path, inputs.profile_path, **meta)
    analyse_run(archive, outcome.run_id)
    return outcome.run_id


@pytest.fixture(scope="session")
def demo_inputs(tmp_path_factory: pytest.TempPathFactory) -> RunInputs:
    return write_demo_inputs(tmp_path_factory.mktemp("demo-inputs"))


@pytest.fixture(scope="session")
def planted_inputs(tmp_path_factory: pytest.TempPathFactory) -> RunInputs:
    return write_planted_inputs(tmp_path_factory.mktemp("planted-inputs"))


@dataclass
class Stocked:
    """The session archive and the ids of its runs."""

    root: Path
    demo_id: str
    planted_id: str


@pytest.fixture(scope="session")
def stocked(
    tmp_path_factory: pytest.TempPathFactory, demo_inputs: RunInputs, planted_inputs: RunInputs
) -> Stocked:
    root = tmp_path_factory.mktemp("archive")
    archive = Archive(root)
    demo_id = ingest_and_analyse(
        archive,
        demo_inputs,
        name="Marram-2 loop, lean-ctl A",
        course="gullhaven-loop",
        controller="lean-ctl-a",
        tags=("demo", "dry"),
    )
    planted_id = ingest_and_analyse(
        archive, planted_inputs, name="planted spike", course="test-bench", tags=("planted",)
    )
    return Stocked(root, demo_id, planted_id)


@pytest.fixture(scope="session")
def grouped(
    tmp_path_factory: pytest.TempPathFactory, demo_inputs: RunInputs, planted_inputs: RunInputs
) -> Stocked:
    """The demo and planted runs, stored in row groups of GROUP_ROWS rows."""
    from analysis.ingest import order, stream

    root = tmp_path_factory.mktemp("grouped")
    archive = Archive(root)
    with pytest.MonkeyPatch.context() as mp:
        mp.setattr(stream, "ROW_GROUP_ROWS", GROUP_ROWS)
        mp.setattr(order, "ROW_GROUP_ROWS", GROUP_ROWS)
        demo_id = ingest_and_analyse(archive, demo_inputs)
        planted_id = ingest_and_analyse(archive, planted_inputs)
    return Stocked(root, demo_id, planted_id)


@pytest.fixture(scope="session")
def client(stocked: Stocked) -> Iterator[TestClient]:
    """Read-only client over the session archive (tests must not change it)."""
    with TestClient(create_app(stocked.root), raise_server_exceptions=False) as c:
        yield c


def fresh_app(root: Path, **options: Any) -> TestClient:
    """A client over a new app on ``root`` (use as a context manager)."""
    return TestClient(create_app(root, **options), raise_server_exceptions=False)


def wait_job(c: TestClient, job_id: str, timeout_s: float = 60.0) -> dict[str, Any]:
    """Poll a job until it is done or failed; return its status."""
    deadline = time.monotonic() + timeout_s
    while True:
        response = c.get(f"/api/jobs/{job_id}")
        assert response.status_code == 200, response.text
        job: dict[str, Any] = response.json()["job"]
        if job["state"] in ("done", "failed"):
            return job
        if time.monotonic() > deadline:
            raise TimeoutError(f"job {job_id} still {job['state']} after {timeout_s} s: {job}")
        time.sleep(0.05)


def upload_form(
    inputs: RunInputs, **fields: str
) -> tuple[list[tuple[str, tuple[str, bytes]]], dict[str, str]]:
    """The multipart parts of an upload of ``inputs`` (files, map, profile) plus text fields."""
    parts = [("files", (p.name, p.read_bytes())) for p in inputs.logs]
    parts.append(("map_file", (inputs.map_path.name, inputs.map_path.read_bytes())))
    parts.append(("profile_file", (inputs.profile_path.name, inputs.profile_path.read_bytes())))
    return parts, dict(fields)
