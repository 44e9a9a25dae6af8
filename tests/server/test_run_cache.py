"""The chart cache: same answers as reading Parquet, bounded, thread-safe, never stale."""

from __future__ import annotations

import threading
from collections.abc import Iterator
from concurrent.futures import ThreadPoolExecutor
from pathlib import Path

import numpy as np
import pytest
from fastapi.testclient import TestClient

from analysis import catalogue as cat
from analysis.archive.store import Archive
from server.run_cache import DERIVED, FRAME, RunCache
from tests.server.dashboard_fixtures import (
    HOLE,
    PLANT_RATE_HZ,
    RunInputs,
    Stocked,
    fresh_app,
    ingest_and_analyse,
    wait_job,
)

SIGNALS = ",".join(
    [cat.ROLL, cat.PITCH, cat.actuator_signal("wheel_l", cat.TORQUE_CMD), cat.TIP_MARGIN]
)
WINDOWS = [
    {},
    {"t0": 5.0, "t1": 6.0},
    {"t0": 19.0, "t1": 22.0},  # spans the hole in the time stamps
    {"t0": 0.5, "t1": 29.7},
    {"t0": -3.0, "t1": 0.25},  # starts before the run
]


@pytest.fixture()
def own_run(tmp_path: Path, planted_inputs: RunInputs) -> Iterator[tuple[TestClient, str]]:
    """A client over a fresh archive holding one planted run (tests may change it)."""
    run_id = ingest_and_analyse(Archive(tmp_path), planted_inputs, name="cache test")
    with fresh_app(tmp_path) as c:
        yield c, run_id


def _series(c: TestClient, run_id: str, signals: str, **params: float | str) -> dict:
    response = c.get(f"/api/runs/{run_id}/series", params={"signals": signals, **params})
    assert response.status_code == 200, response.text
    body: dict = response.json()
    return body


@pytest.mark.parametrize("window", WINDOWS)
def test_cached_series_equal_the_parquet_read(client: TestClient, stocked: Stocked, window) -> None:
    with fresh_app(stocked.root, cache_mb=0) as uncached:
        for points in (100, 2000):
            want = _series(uncached, stocked.planted_id, SIGNALS, points=points, **window)
            got = _series(client, stocked.planted_id, SIGNALS, points=points, **window)
            # Twice: the second answer comes from the cached arrays (and the whole-run
            # reductions), and must not differ from the first.
            again = _series(client, stocked.planted_id, SIGNALS, points=points, **window)
            assert got == want
            assert again == want


def test_a_zoom_reads_no_parquet_once_the_run_is_cached(
    stocked: Stocked, monkeypatch: pytest.MonkeyPatch
) -> None:
    with fresh_app(stocked.root) as c:
        _series(c, stocked.planted_id, SIGNALS)
        cache: RunCache = c.app.state.run_cache  # type: ignore[attr-defined]
        # The whole run came from the stored overview; the columns load in the background.
        cache.wait_warm()
        loads = cache.loads

        def no_reads(*args, **kwargs):
            raise AssertionError("the archive was read although the columns are cached")

        monkeypatch.setattr(Archive, "load_frame", no_reads)
        monkeypatch.setattr(Archive, "read_result_series", no_reads)
        body = _series(c, stocked.planted_id, SIGNALS, t0=19.0, t1=22.0)
        assert cache.loads == loads
        pitch = body["signals"][cat.PITCH]
        nulls = [t for t, v in zip(pitch["t"], pitch["y"], strict=True) if v is None]
        # The 1 s hole in the stamps is one null, between its two edges.
        assert len(nulls) == 1
        assert (HOLE[0] - 1) / PLANT_RATE_HZ < nulls[0] < HOLE[1] / PLANT_RATE_HZ


def test_reanalysis_from_the_page_is_never_served_stale(own_run) -> None:
    c, run_id = own_run
    name = f"wheel_l.{cat.TORQUE_RMS}"
    before = _series(c, run_id, name, t0=12.0, t1=14.0)["signals"][name]["y"]
    # The sliding RMS window is a threshold: a shorter window changes the derived series.
    response = c.post(f"/api/runs/{run_id}/analyse", json={"thermal_window_s": 1.0})
    assert response.status_code == 202, response.text
    assert wait_job(c, response.json()["job"]["id"])["state"] == "done"
    after = _series(c, run_id, name, t0=12.0, t1=14.0)["signals"][name]["y"]
    assert after != before
    with fresh_app(c.app.state.archive.root, cache_mb=0) as uncached:  # type: ignore[attr-defined]
        assert after == _series(uncached, run_id, name, t0=12.0, t1=14.0)["signals"][name]["y"]


def test_results_rewritten_by_another_process_are_seen(own_run) -> None:
    c, run_id = own_run
    archive: Archive = c.app.state.archive  # type: ignore[attr-defined]
    first = _series(c, run_id, cat.TIP_MARGIN)["signals"][cat.TIP_MARGIN]["y"]
    assert any(v != 0.123 for v in first if v is not None)
    # Another process (the command line) stores new results: no route hook runs.
    stored = archive.read_results(run_id)
    assert stored is not None
    events, summary = stored
    series = archive.read_result_series(run_id)
    series[cat.TIP_MARGIN] = 0.123
    archive.write_results(run_id, events, series, summary)
    now = _series(c, run_id, cat.TIP_MARGIN)["signals"][cat.TIP_MARGIN]["y"]
    assert {v for v in now if v is not None} == {0.123}


def test_edit_and_delete_drop_the_run(own_run) -> None:
    c, run_id = own_run
    cache: RunCache = c.app.state.run_cache  # type: ignore[attr-defined]
    _series(c, run_id, SIGNALS)
    assert cache.runs() == [run_id]
    assert c.patch(f"/api/runs/{run_id}", json={"notes": "windy"}).status_code == 200
    assert cache.runs() == []
    _series(c, run_id, SIGNALS)
    assert c.delete(f"/api/runs/{run_id}", params={"confirm": run_id}).status_code == 200
    assert cache.runs() == []
    assert c.get(f"/api/runs/{run_id}/series", params={"signals": cat.ROLL}).status_code == 404


def test_invalidation_during_a_load_keeps_nothing(
    stocked: Stocked, monkeypatch: pytest.MonkeyPatch
) -> None:
    archive = Archive(stocked.root)
    cache = RunCache(max_bytes=1 << 30)
    real_read = RunCache._read

    def read_then_reanalysed(self, *args, **kwargs):
        out = real_read(self, *args, **kwargs)
        self.invalidate(stocked.planted_id)  # a re-analysis finished while we were reading
        return out

    monkeypatch.setattr(RunCache, "_read", read_then_reanalysed)
    cols = cache.columns(archive, stocked.planted_id, FRAME, [cat.ROLL])
    assert cat.ROLL in cols.values  # the request itself is answered
    assert cache.runs() == []
    assert cache.nbytes == 0


def test_bounds_on_bytes_and_runs(stocked: Stocked) -> None:
    archive = Archive(stocked.root)
    cache = RunCache(max_bytes=1 << 30, max_runs=1)
    cache.columns(archive, stocked.planted_id, FRAME, [cat.ROLL])
    cache.columns(archive, stocked.demo_id, FRAME, [cat.ROLL])
    assert cache.runs() == [stocked.demo_id]  # least recently used run went out

    # 3,000 samples of t and roll at 8 bytes each (about 48 kB) cannot fit in 10 kB.
    small = RunCache(max_bytes=10_000)
    assert small.usable(archive, stocked.planted_id)
    cols = small.columns(archive, stocked.planted_id, FRAME, [cat.ROLL])
    assert cols.values[cat.ROLL].size == cols.t.size > 0
    assert small.runs() == [] and small.nbytes == 0
    assert not small.usable(archive, stocked.planted_id)  # the route reads windows instead
    assert RunCache(max_bytes=0).usable(archive, stocked.planted_id) is False


def test_concurrent_requests_load_a_run_once(stocked: Stocked) -> None:
    archive = Archive(stocked.root)
    cache = RunCache(max_bytes=1 << 30)
    names = [cat.ROLL, cat.PITCH, cat.ROLL_RATE]
    start = threading.Barrier(8)

    def ask(_: int):
        start.wait()
        return cache.columns(archive, stocked.planted_id, FRAME, names)

    with ThreadPoolExecutor(8) as pool:
        results = list(pool.map(ask, range(8)))
    assert cache.loads == 1
    assert cache.hits == 7
    for cols in results:
        assert cols.t is results[0].t
        for name in names:
            np.testing.assert_array_equal(cols.values[name], results[0].values[name])
    derived = cache.columns(archive, stocked.planted_id, DERIVED, [cat.TIP_MARGIN])
    assert derived.values[cat.TIP_MARGIN].size == derived.t.size


def test_fits_is_judged_from_the_row_count_before_any_read(
    stocked: Stocked, monkeypatch: pytest.MonkeyPatch
) -> None:
    archive = Archive(stocked.root)

    def no_reads(*args, **kwargs):
        raise AssertionError("fits() read the run's samples")

    monkeypatch.setattr(Archive, "load_frame", no_reads)
    monkeypatch.setattr(Archive, "read_result_series", no_reads)
    want = {FRAME: [cat.ROLL, cat.PITCH, cat.actuator_signal("wheel_l", cat.TORQUE_CMD)]}
    want[DERIVED] = [cat.TIP_MARGIN]
    # The planted run keeps 2,900 rows (3,000 written, the 100-row hole left out); the
    # four columns plus a time axis per source are 6 float64 arrays: 139,200 bytes.
    assert RunCache(max_bytes=139_200).fits(archive, stocked.planted_id, want)
    small = RunCache(max_bytes=139_199)
    assert not small.fits(archive, stocked.planted_id, want)
    assert not small.usable(archive, stocked.planted_id)  # marked: windows come from Parquet
    assert not small.warm_later(archive, stocked.planted_id, want)
    assert small.loads == 0 and small.nbytes == 0
    assert not RunCache(max_bytes=0).fits(archive, stocked.planted_id, want)


def test_a_run_too_large_for_the_cache_is_never_read_whole(
    stocked: Stocked, monkeypatch: pytest.MonkeyPatch
) -> None:
    """A run whose chart columns pass the cache's bound (an eight-hour run on the
    default bound) is served from its overview and from windows of the archive."""
    windows: list[tuple[object, object]] = []
    load_frame, read_series = Archive.load_frame, Archive.read_result_series

    def frame_spy(self, run_id, columns=None, t0=None, t1=None, **kw):
        windows.append((t0, t1))
        return load_frame(self, run_id, columns, t0, t1, **kw)

    def series_spy(self, run_id, columns=None, t0=None, t1=None):
        windows.append((t0, t1))
        return read_series(self, run_id, columns, t0, t1)

    with fresh_app(stocked.root, cache_mb=0) as uncached:
        want_whole = _series(uncached, stocked.planted_id, SIGNALS)
        want_zoom = _series(uncached, stocked.planted_id, SIGNALS, t0=19.0, t1=22.0)
    monkeypatch.setattr(Archive, "load_frame", frame_spy)
    monkeypatch.setattr(Archive, "read_result_series", series_spy)
    with fresh_app(stocked.root) as c:
        # 20 kB: less than the 139 kB the four signals' whole-run columns take.
        cache = RunCache(max_bytes=20_000)
        c.app.state.run_cache = cache  # type: ignore[attr-defined]
        zoom = _series(c, stocked.planted_id, SIGNALS, t0=19.0, t1=22.0)  # a link to a window
        whole = _series(c, stocked.planted_id, SIGNALS)
        cache.wait_warm()  # a warm-up, had one started, would read the whole run
        again = _series(c, stocked.planted_id, SIGNALS, t0=19.0, t1=22.0)
    assert zoom == want_zoom and again == want_zoom and whole == want_whole
    assert cache.loads == 0
    assert (None, None) not in windows  # neither a zoom nor a warm-up read the whole run
    # The windows the page asked for, each read from the archive (frame and derived).
    assert windows.count((19.0, 22.0)) == 4
