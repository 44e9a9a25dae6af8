"""The whole-run series request is answered from the run's stored chart overview.

A small run (planted signals, 100 Hz) with a single-sample torque spike, a
single-sample pitch dip, a 5 s and a 1 s hole in the time stamps; the overview's
bucket count is patched down to 32 so that the overview really reduces it.
"""

from __future__ import annotations

import logging
from collections.abc import Iterator
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from fastapi.testclient import TestClient

from analysis import catalogue as cat
from analysis import overview as overview_module
from analysis.archive.overview_store import OVERVIEW_FILE, read_overview
from analysis.archive.store import Archive
from analysis.overview import build_overview
from server.app import create_app
from server.run_cache import RunCache
from tests.server.dashboard_fixtures import (
    PLANT_RATE_HZ,
    SPIKE_INDEX,
    SPIKE_NM,
    ingest_and_analyse,
    spy_load_frame,
    wait_job,
    write_planted_inputs,
)

BUCKETS = 32
#: The largest whole-run budget an overview of BUCKETS serves (2 points per bucket,
#: 4 preselected points per output point).
POINTS = 16
DIP_INDEX = 2600  # row of the planted log (t = 26.00 s)
DIP_RAD = -0.75
FIVE_S_HOLE = (500, 1000)  # rows removed: t = 5.00 .. 9.99 s
TORQUE = cat.actuator_signal("wheel_l", cat.TORQUE_CMD)
RMS = f"wheel_l.{cat.TORQUE_RMS}"
SIGNALS = ",".join([TORQUE, cat.PITCH, cat.ROLL, RMS])


@pytest.fixture()
def run(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> Iterator[tuple[Path, str]]:
    """An archive holding the run, analysed with a 32-bucket overview."""
    monkeypatch.setattr(overview_module, "OVERVIEW_BUCKETS", BUCKETS)
    inputs = write_planted_inputs(tmp_path / "inputs")
    log = inputs.logs[0]
    frame = pd.read_csv(log)  # the planted log already lacks its 1 s hole
    row = np.round((frame["stamp_s"] - frame["stamp_s"].iloc[0]) * PLANT_RATE_HZ).astype(int)
    frame.loc[row == DIP_INDEX, "pitch"] = DIP_RAD
    frame = frame[(row < FIVE_S_HOLE[0]) | (row >= FIVE_S_HOLE[1])]
    frame.to_csv(log, index=False)
    root = tmp_path / "archive"
    run_id = ingest_and_analyse(Archive(root), inputs, name="overview test")
    yield root, run_id


def _client(root: Path, **options: int) -> TestClient:
    return TestClient(create_app(root, **options), raise_server_exceptions=False)


def _whole(c: TestClient, run_id: str, signals: str = SIGNALS) -> dict:
    response = c.get(
        f"/api/runs/{run_id}/series", params={"signals": signals, "points": POINTS, "units": "si"}
    )
    assert response.status_code == 200, response.text
    body: dict = response.json()
    return body


def test_spike_and_dip_survive_the_whole_run_exactly(run, monkeypatch) -> None:
    root, run_id = run
    with _client(root, cache_mb=0) as c:

        def no_reads(*args, **kwargs):
            raise AssertionError("the whole run was read although its overview is stored")

        # Served from the overview alone: the run's samples are not read.
        monkeypatch.setattr(Archive, "load_frame", no_reads)
        monkeypatch.setattr(Archive, "read_result_series", no_reads)
        body = _whole(c, run_id)
    torque, pitch = body["signals"][TORQUE], body["signals"][cat.PITCH]
    assert torque["downsampled"] and pitch["downsampled"]
    assert len([v for v in torque["y"] if v is not None]) <= POINTS
    # Inputs planted in the log: the spike value and its time, the dip value and its time.
    assert max(v for v in torque["y"] if v is not None) == SPIKE_NM
    assert SPIKE_INDEX / PLANT_RATE_HZ in torque["t"]
    assert min(v for v in pitch["y"] if v is not None) == DIP_RAD
    assert DIP_INDEX / PLANT_RATE_HZ in pitch["t"]
    # 3000 rows less the 5 s and the 1 s holes (500 + 100 rows) were reduced.
    assert pitch["samples"] == 2400
    assert body["t0"] == 0.0 and body["t1"] == pytest.approx(29.99)


def test_holes_in_the_stamps_are_null_breaks_in_the_whole_run(run) -> None:
    root, run_id = run
    with _client(root) as c:
        pitch = _whole(c, run_id)["signals"][cat.PITCH]
        c.app.state.run_cache.wait_warm()  # type: ignore[attr-defined]
    nulls = [t for t, v in zip(pitch["t"], pitch["y"], strict=True) if v is None]
    # One break in the 5 s hole (rows 500..999) and one in the 1 s hole (rows 2000..2099).
    assert len(nulls) == 2
    assert 4.99 < nulls[0] < 10.0
    assert 19.99 < nulls[1] < 21.0


def test_cold_and_warm_cache_give_the_same_first_draw(run) -> None:
    root, run_id = run
    with _client(root) as c:
        cold = _whole(c, run_id)
        cache: RunCache = c.app.state.run_cache  # type: ignore[attr-defined]
        cache.wait_warm()
        assert cache.has_columns(run_id, "frame", [TORQUE, cat.PITCH, cat.ROLL])
        assert cache.has_columns(run_id, "derived", [RMS])
        warm = _whole(c, run_id)
        cache.clear()
        again = _whole(c, run_id)
        cache.wait_warm()
    assert cold == warm == again


def test_reanalysis_with_another_threshold_replaces_the_overview(run) -> None:
    root, run_id = run
    archive = Archive(root)
    with _client(root) as c:
        before = _whole(c, run_id)["signals"][RMS]["y"]
        # The sliding RMS window is a threshold: a shorter window changes the derived series.
        response = c.post(f"/api/runs/{run_id}/analyse", json={"thermal_window_s": 1.0})
        assert response.status_code == 202, response.text
        assert wait_job(c, response.json()["job"]["id"])["state"] == "done"
        after = _whole(c, run_id)["signals"][RMS]["y"]
        c.app.state.run_cache.wait_warm()  # type: ignore[attr-defined]
    assert after != before
    stored = read_overview(archive, run_id)
    assert stored is not None  # written by the re-analysis, current
    fresh = build_overview(archive.load_frame(run_id), archive.read_result_series(run_id))
    np.testing.assert_array_equal(stored.signals[RMS].y, fresh.signals[RMS].y)
    np.testing.assert_array_equal(stored.signals[RMS].t, fresh.signals[RMS].t)


def _from_samples(root: Path, run_id: str) -> dict:
    """The whole-run answer reduced from the run's samples (no overview used)."""
    with _client(root, cache_mb=0) as c:
        response = c.get(
            f"/api/runs/{run_id}/series",
            params={"signals": SIGNALS, "points": POINTS, "units": "si", "t0": -1, "t1": 1e6},
        )
    assert response.status_code == 200, response.text
    body: dict = response.json()
    return body


def test_a_run_without_an_overview_gets_one_on_first_request(run) -> None:
    root, run_id = run
    path = root / "runs" / run_id / OVERVIEW_FILE
    with _client(root, cache_mb=0) as c:
        want = _whole(c, run_id)
    samples = _from_samples(root, run_id)
    assert samples["signals"] != want["signals"]  # the two paths are told apart below
    path.unlink()  # as for a run stored before overviews existed
    with _client(root, cache_mb=0) as c:
        # This once, reduced from the samples (the spike is there too); the overview
        # is built meanwhile in the background, not in the request.
        first = _whole(c, run_id)
        c.app.state.run_cache.wait_warm()  # type: ignore[attr-defined]
        assert first["signals"] == samples["signals"]
        assert max(v for v in first["signals"][TORQUE]["y"] if v is not None) == SPIKE_NM
        assert path.is_file()
        assert _whole(c, run_id) == want
    assert read_overview(Archive(root), run_id) is not None


@pytest.mark.parametrize("damage", ["garbage", "truncated"])
def test_an_unreadable_overview_is_rebuilt_not_a_500(run, damage, caplog) -> None:
    root, run_id = run
    path = root / "runs" / run_id / OVERVIEW_FILE
    with _client(root, cache_mb=0) as c:
        want = _whole(c, run_id)
    if damage == "garbage":
        path.write_bytes(b"this is not a Parquet file")
    else:
        path.write_bytes(path.read_bytes()[: path.stat().st_size // 2])
    assert read_overview(Archive(root), run_id) is None
    with caplog.at_level(logging.WARNING, logger="outrigger.archive"), _client(root) as c:
        first = _whole(c, run_id)  # from the samples while the overview is rebuilt
        c.app.state.run_cache.wait_warm()  # type: ignore[attr-defined]
        assert first["signals"] == _from_samples(root, run_id)["signals"]
        assert _whole(c, run_id) == want
    assert "unreadable" in caplog.text
    assert read_overview(Archive(root), run_id) is not None


def test_a_failing_warm_up_is_logged_and_the_server_goes_on(run, monkeypatch, caplog) -> None:
    root, run_id = run

    def broken_read(*args, **kwargs):
        raise OSError("disk went away")

    with _client(root) as c:
        cache: RunCache = c.app.state.run_cache  # type: ignore[attr-defined]
        monkeypatch.setattr(RunCache, "_read", broken_read)
        with caplog.at_level(logging.WARNING, logger="outrigger.server"):
            first = _whole(c, run_id)
            cache.wait_warm()
        assert "Loading the chart columns" in caplog.text
        assert not cache.has_columns(run_id, "frame", [cat.PITCH])
        assert _whole(c, run_id) == first  # still answered from the overview
        monkeypatch.undo()
        zoom = c.get(
            f"/api/runs/{run_id}/series", params={"signals": cat.PITCH, "t0": 12.0, "t1": 13.0}
        )
        assert zoom.status_code == 200
        assert zoom.json()["signals"][cat.PITCH]["samples"] == 101


def test_a_budget_finer_than_the_overview_reads_the_samples(run) -> None:
    root, run_id = run
    with _client(root, cache_mb=0) as c:
        body = c.get(
            f"/api/runs/{run_id}/series", params={"signals": cat.PITCH, "points": 3000}
        ).json()
    # 2400 samples fit a 3000-point budget: every sample comes back (plus two breaks).
    s = body["signals"][cat.PITCH]
    assert not s["downsampled"] and len(s["t"]) == 2400 + 2


def test_a_large_run_without_an_overview_is_answered_from_one_built_in_windows(
    run, monkeypatch
) -> None:
    """An eight-hour run's Run page asks for 3 GB of columns: a run without an overview
    that large has it built first, a window at a time, and is answered from it."""
    from analysis.archive import overview_store
    from server import run_cache

    root, run_id = run
    path = root / "runs" / run_id / OVERVIEW_FILE
    with _client(root, cache_mb=0) as c:
        want = _whole(c, run_id)
    path.unlink()  # as for a run stored before overviews existed
    monkeypatch.setattr(run_cache, "WHOLE_READ_MAX_BYTES", 1)  # every run counts as large
    monkeypatch.setattr(overview_store, "BUILD_WINDOW_ROWS", 500)
    monkeypatch.setattr(Archive, "row_group_starts", lambda self, run_id: None)  # one group
    reads = spy_load_frame(monkeypatch)
    with _client(root, cache_mb=0) as c:
        first = _whole(c, run_id)
        assert path.is_file()  # built before the answer, not in the background
    assert first == want  # the spike, the dip and the holes as the analysis's overview
    data = [(t0, t1) for cols, t0, t1 in reads if cols != []]
    assert len(data) > 2 and all(t0 is not None or t1 is not None for t0, t1 in data)
