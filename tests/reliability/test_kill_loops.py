"""kill -9 during ingest, analysis and upload: never a half-written run, nothing lost.

Bounded loops (issue 11): a few kills each, at spread-out moments of a child's work;
after each, a fresh :class:`Archive` on the folder must hold only whole runs (meta,
streams, results all readable), a catalog in line with the folders, an empty staging
folder, and the work must complete when run again.
"""

from __future__ import annotations

import json
import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import pyarrow.parquet as pq
import pytest

from analysis.archive.store import Archive
from tests.analysis.ingest_kit import MAP, PROFILE, state_lines, torque_lines, write
from tests.reliability.measure import ROOT

#: Kill moments, as fractions of the uninterrupted run's wall time. [-]
KILL_AT = (0.4, 0.75)


def _cli(args: list[str]) -> subprocess.Popen[str]:
    return subprocess.Popen(
        [sys.executable, "-m", "server.cli.main", *args],
        cwd=ROOT, env=dict(os.environ, PYTHONPATH=str(ROOT)),
        stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
    )  # fmt: skip


def _timed(args: list[str]) -> float:
    start = time.monotonic()
    proc = _cli(args)
    out, err = proc.communicate(timeout=300)
    assert proc.returncode == 0, err
    return time.monotonic() - start


def _kill_after(args: list[str], seconds: float) -> None:
    proc = _cli(args)
    time.sleep(seconds)
    proc.send_signal(signal.SIGKILL)
    proc.communicate(timeout=60)


def _assert_whole(root: Path) -> Archive:
    archive = Archive(root)  # opening cleans staging and repairs what a crash left
    assert list((root / "staging").iterdir()) == []
    folders = sorted(p.name for p in (root / "runs").iterdir())
    listed = sorted(r["run_id"] for r in archive.list_runs())
    assert folders == listed
    for run_id in folders:
        meta = archive.get_meta(run_id)
        for s in meta["streams"]:
            assert pq.ParquetFile(root / "runs" / run_id / s["path"]).metadata.num_rows == s["rows"]
        results = archive.read_results(run_id)
        listed_analysed = {r["run_id"]: r["analysed"] for r in archive.list_runs()}[run_id]
        assert listed_analysed == (results is not None)
        if results is not None:
            assert results[1]["run"] == run_id or "event_counts" in results[1]
        assert not any(
            p.name.startswith(".results-previous-") for p in (root / "runs" / run_id).iterdir()
        )
    return archive


@pytest.fixture(scope="module")
def logs(tmp_path_factory: pytest.TempPathFactory) -> list[str]:
    d = tmp_path_factory.mktemp("kill-logs")
    return [
        str(write(d / "k_state.csv", state_lines(24_000))),  # 60 s at 400 Hz
        str(write(d / "k_torque.csv", torque_lines(6_000))),
    ]


def test_kill_9_during_ingest_and_analysis_leaves_whole_runs(tmp_path, logs):
    root = tmp_path / "data"
    args = ["ingest", *logs, "--map", str(MAP), "--profile", str(PROFILE), "--data", str(root)]
    full = _timed([*args[:-2], "--data", str(tmp_path / "timing")])
    for fraction in KILL_AT:
        _kill_after(args, fraction * full)
        _assert_whole(root)
    # Whatever the kills left, ingesting again ends with exactly one analysed run.
    proc = _cli(args)
    _, err = proc.communicate(timeout=300)
    assert proc.returncode == 0, err
    archive = _assert_whole(root)
    runs = archive.list_runs()
    assert len(runs) == 1 and runs[0]["analysed"]


def test_kill_9_during_reanalysis_keeps_results(tmp_path, logs):
    root = tmp_path / "data"
    proc = _cli(["ingest", *logs, "--map", str(MAP), "--profile", str(PROFILE),
                 "--data", str(root), "--json"])  # fmt: skip
    out, err = proc.communicate(timeout=300)
    assert proc.returncode == 0, err
    run_id = json.loads(out)["run_id"]
    args = ["analyse", run_id, "--data", str(root)]
    full = _timed(args)
    for fraction in KILL_AT:
        _kill_after(args, fraction * full)
        archive = _assert_whole(root)
        assert archive.read_results(run_id) is not None  # old or new, never none
