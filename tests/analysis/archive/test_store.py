"""Run archive: atomic ingest, duplicates, staging clean-up, as-of frames, results, configs."""

from __future__ import annotations

import dataclasses
import json
import sqlite3
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

import analysis.ingest.stream as ingest_mod
from analysis.archive.store import Archive
from analysis.errors import ChannelMapError, ProfileError, RunNotFoundError
from analysis.ingest.stream import ingest_files
from analysis.profile import load_profile
from tests.analysis.ingest_kit import (
    MAP,
    PROFILE,
    START_US,
    map_text,
    state_lines,
    torque_lines,
    write,
)


def _snapshot(archive: Archive) -> tuple[list[str], list[tuple]]:
    files = sorted(str(p.relative_to(archive.root)) for p in archive.root.rglob("*"))
    with sqlite3.connect(archive.root / "catalog.sqlite") as con:
        rows = con.execute("SELECT * FROM runs ORDER BY run_id").fetchall()
        rows += con.execute("SELECT * FROM run_tags ORDER BY run_id, tag").fetchall()
    return files, rows


def _run(tmp_path, archive, stem="r1", n=400, **kw):
    s = write(tmp_path / f"{stem}_state.csv", state_lines(n))
    q = write(tmp_path / f"{stem}_torque.csv", torque_lines(n // 4))
    return ingest_files(archive, [s, q], MAP, PROFILE, **kw)


def test_failure_half_way_leaves_archive_as_before(tmp_path, monkeypatch):
    archive = Archive(tmp_path / "data")
    _run(tmp_path, archive, "first", course="gullhaven-loop", tags=["baseline"])
    before = _snapshot(archive)
    real = ingest_mod.open_writer
    calls = []

    def failing(path, schema, *rest):
        calls.append(path)
        if len(calls) == 2:  # the second stream's writer: the first stream is written
            raise OSError("disk full (simulated)")
        return real(path, schema, *rest)

    monkeypatch.setattr(ingest_mod, "open_writer", failing)
    with pytest.raises(OSError, match="simulated"):
        _run(tmp_path, archive, "second", n=500)  # other content: not a duplicate
    assert len(calls) == 2
    assert _snapshot(archive) == before


def test_stale_staging_cleaned_and_catalog_reconciled(tmp_path):
    archive = Archive(tmp_path / "data")
    out = _run(tmp_path, archive)
    stale = archive.root / "staging" / "999999999-deadbeef"  # no such process
    (stale / "streams").mkdir(parents=True)
    (stale / "streams" / "state.parquet").write_bytes(b"partial")
    junk = archive.root / "staging" / "not-a-pid"
    junk.mkdir()
    mine = archive.new_staging()  # this process is alive: kept
    # A run folder renamed into place whose catalog row was never written (killed):
    with sqlite3.connect(archive.root / "catalog.sqlite") as con:
        con.execute("DELETE FROM runs")
    reopened = Archive(archive.root)
    assert not stale.exists() and not junk.exists() and mine.exists()
    assert [r["run_id"] for r in reopened.list_runs()] == [out.run_id]


def test_duplicate_ingest_recognised(tmp_path):
    archive = Archive(tmp_path / "data")
    first = _run(tmp_path, archive)
    before = _snapshot(archive)
    again = _run(tmp_path, archive)
    assert again.duplicate_of == first.run_id == again.run_id
    assert again.report == first.report
    assert _snapshot(archive) == before


def test_meta_contents(tmp_path):
    archive = Archive(tmp_path / "data")
    out = _run(tmp_path, archive, name="lap 1", course="gullhaven-loop", controller="v2.1")
    meta = archive.get_meta(out.run_id)
    assert meta["run_id"] == out.run_id
    assert meta["profile_toml"] == PROFILE.read_text()
    assert meta["channel_map_toml"] == MAP.read_text()
    assert set(meta["source_files"]) == {"r1_state.csv", "r1_torque.csv"}
    assert all(len(h) == 64 for h in meta["source_files"].values())
    # vel_x = 1.5 + 0.001 i m/s at 400 Hz for 400 rows: trapezoid integral (analytic, linear v)
    v0, v1, T = 1.5, 1.5 + 0.001 * 399, 399 * 0.0025
    assert meta["distance_m"] == pytest.approx(0.5 * (v0 + v1) * T, rel=1e-9)
    assert meta["duration_s"] == pytest.approx(max(0.9975, 0.001 + 99 * 0.01), abs=1e-9)
    assert meta["outrigger_version"]
    assert archive.load_profile(out.run_id) == load_profile(PROFILE)


def _same_profile(a, b):
    """Equal, thresholds to float rounding (they pass deg -> rad -> deg through pint)."""
    assert dataclasses.replace(a, thresholds=b.thresholds) == b
    # 1e-12 relative: two unit conversions in float64
    assert dataclasses.asdict(a.thresholds) == pytest.approx(
        dataclasses.asdict(b.thresholds), rel=1e-12
    )


def test_load_profile_without_toml_text(tmp_path):
    archive = Archive(tmp_path / "data")
    profile = load_profile(PROFILE)
    s = write(tmp_path / "o_state.csv", state_lines(100))
    out = ingest_files(archive, [s], MAP, profile)
    assert archive.get_meta(out.run_id)["profile_toml"] is None
    _same_profile(archive.load_profile(out.run_id), profile)


def test_list_update_delete_and_filters(tmp_path):
    archive = Archive(tmp_path / "data")
    a = _run(tmp_path, archive, "a", course="gullhaven-loop", controller="v1", tags=["x"])
    b = _run(tmp_path, archive, "b", n=800, course="dune-track", controller="v2", tags=["x", "y"])
    assert {r["run_id"] for r in archive.list_runs(tag="x")} == {a.run_id, b.run_id}
    assert [r["run_id"] for r in archive.list_runs(course="dune-track")] == [b.run_id]
    assert [r["run_id"] for r in archive.list_runs(controller="v1")] == [a.run_id]
    assert len(archive.list_runs(date_from="2026-11-28", date_to="2026-11-28")) == 2
    assert archive.list_runs(date_to="2026-11-27") == []
    row = archive.list_runs(tag="y")[0]
    assert row["tags"] == ["x", "y"] and row["analysed"] is False
    meta = archive.update_meta(a.run_id, name="renamed", tags=["z"], notes="windy")
    assert meta["name"] == "renamed"
    assert archive.get_meta(a.run_id)["notes"] == "windy"
    assert [r["run_id"] for r in archive.list_runs(tag="z")] == [a.run_id]
    assert archive.list_runs(tag="x") == archive.list_runs(tag="y")
    archive.delete_run(b.run_id)
    assert [r["run_id"] for r in archive.list_runs()] == [a.run_id]
    with pytest.raises(RunNotFoundError):
        archive.get_meta(b.run_id)
    assert archive.rebuild_catalog() == 1


@pytest.mark.parametrize("bad", ["../x", "runs/../../etc", "ABC", "", "a b", "x/y"])
def test_run_ids_with_path_tricks_are_not_found(tmp_path, bad):
    archive = Archive(tmp_path / "data")
    with pytest.raises(RunNotFoundError):
        archive.get_meta(bad)


def test_run_files_lists_parquet_and_meta(tmp_path):
    archive = Archive(tmp_path / "data")
    out = _run(tmp_path, archive)
    names = sorted(p.name for p in archive.run_files(out.run_id))
    assert names == ["meta.json", "state.parquet", "torque.parquet"]


def _asof_run(tmp_path, archive):
    """State at 100 Hz for 3 s; torque at 20 Hz with a gap from 1.0 s to 2.0 s."""
    cmap = tmp_path / "asof.toml"
    cmap.write_text(
        map_text(files="*_state.csv")
        + """
[[source]]
name = "torque"
files = "*_torque.csv"
kind = "torque"
time_column = "t_us"
time_unit = "us"
time_origin = "epoch"
[source.columns]
tq = { signal = "wheel_l.torque_cmd", unit = "N*m" }
"""
    )
    st = ["stamp_us,roll_deg,speed"] + [f"{START_US + i * 10_000},{i},1.0" for i in range(300)]
    tq_times = [t for t in range(0, 3_000_000, 50_000) if not 1_000_000 < t < 2_000_000]
    tq = ["t_us,tq"] + [f"{START_US + t + 3_000},{t / 1e6}" for t in tq_times]
    files = [write(tmp_path / "a_state.csv", st), write(tmp_path / "a_torque.csv", tq)]
    return ingest_files(archive, files, cmap, PROFILE)


def test_load_frame_asof_never_bridges_a_gap(tmp_path):
    archive = Archive(tmp_path / "data")
    out = _asof_run(tmp_path, archive)
    frame = archive.load_frame(out.run_id)
    assert list(frame.columns[:1]) == ["t"]
    assert len(frame) == 300
    t = frame["t"].to_numpy()
    tq = frame["wheel_l.torque_cmd"].to_numpy()
    # Torque samples at 0.003 + 0.05 k s carry the value 0.05 k (none between 1.003 and
    # 2.003 s). Expected as-of value: the last sample at or before t, if no more than
    # 1.5 torque periods (75 ms) before t; else missing.
    samples = [(0.003 + 0.05 * k, 0.05 * k) for k in range(60) if not 20 < k < 40]
    expected = []
    for ti in t:
        earlier = [(ts, v) for ts, v in samples if ts <= ti + 1e-12]
        ok = earlier and ti - earlier[-1][0] <= 0.075 + 1e-12
        expected.append(earlier[-1][1] if ok else np.nan)
    in_gap = (t > 1.003 + 0.075) & (t < 2.003)
    np.testing.assert_allclose(tq, expected, atol=1e-12)
    assert np.isnan(tq[in_gap]).all() and in_gap.sum() > 50


def test_load_frame_columns_and_window(tmp_path):
    archive = Archive(tmp_path / "data")
    out = _asof_run(tmp_path, archive)
    frame = archive.load_frame(
        out.run_id, ["wheel_l.torque_cmd", "roll", "no_such"], t0=0.5, t1=0.6
    )
    assert list(frame.columns) == ["t", "wheel_l.torque_cmd", "roll"]
    assert frame["t"].min() >= 0.5 and frame["t"].max() <= 0.6
    # window start: the earlier torque sample (0.453 s) lies before t0 and is still used
    assert frame["wheel_l.torque_cmd"].iloc[0] == pytest.approx(0.45)
    assert frame["roll"].iloc[0] == pytest.approx(np.radians(50))


def test_results_round_trip_and_replace(tmp_path):
    archive = Archive(tmp_path / "data")
    out = _run(tmp_path, archive)
    assert archive.read_results(out.run_id) is None
    events = pd.DataFrame(
        {
            "kind": ["slip"],
            "channel": ["wheel_l"],
            "start_s": [0.1],
            "end_s": [0.2],
            "details": [{"peak": 0.3}],
        }
    )
    series = pd.DataFrame({"t": np.arange(10) * 0.1, "slip_ratio": np.linspace(0, 1, 10)})
    archive.write_results(out.run_id, events, series, {"kpi": np.float64(1.5), "nan": float("nan")})
    ev, summary = archive.read_results(out.run_id)
    assert ev["details"][0] == {"peak": 0.3}
    assert summary == {"kpi": 1.5, "nan": None}
    part = archive.read_result_series(out.run_id, ["slip_ratio"], t0=0.25, t1=0.55)
    assert part["t"].tolist() == pytest.approx([0.3, 0.4, 0.5])
    assert archive.list_runs()[0]["analysed"] is True
    archive.write_results(out.run_id, events.iloc[:0], series, {"kpi": 2})
    ev, summary = archive.read_results(out.run_id)
    assert len(ev) == 0 and summary == {"kpi": 2}
    assert list((archive.root / "staging").iterdir()) == []


def test_configs_saved_after_checking(tmp_path):
    archive = Archive(tmp_path / "data")
    path = archive.save_config("profile", "marram-2", PROFILE.read_text())
    assert path.read_text() == PROFILE.read_text()
    archive.save_config("map", "marram2_v1", MAP.read_text())
    assert archive.list_configs("profile") == ["marram-2"]
    assert archive.config_path("map", "marram2_v1").is_file()
    with pytest.raises(ProfileError, match="track_width_m"):
        archive.save_config("profile", "broken", PROFILE.read_text().replace("track_width_m", "tw"))
    with pytest.raises(ChannelMapError, match="may hold only"):
        archive.save_config("map", "../evil", MAP.read_text())
    with pytest.raises(ChannelMapError, match="unknown to the units library"):
        archive.save_config("map", "bad", MAP.read_text().replace('"rpm"', '"rpmm"'))
    with pytest.raises(ChannelMapError, match="No stored map named 'nope'"):
        archive.config_path("map", "nope")
    assert archive.list_configs("map") == ["marram2_v1"]


def test_meta_json_is_strict_json(tmp_path):
    archive = Archive(tmp_path / "data")
    out = _run(tmp_path, archive)
    text = (archive.root / "runs" / out.run_id / "meta.json").read_text()
    json.loads(text, parse_constant=lambda c: pytest.fail(f"non-standard JSON constant {c}"))


def _results(kpi: int) -> tuple[pd.DataFrame, pd.DataFrame, dict[str, int]]:
    events = pd.DataFrame({"kind": ["slip"], "start_s": [0.1], "end_s": [0.2]})
    series = pd.DataFrame({"t": np.arange(5) * 0.1, "slip_ratio": np.zeros(5)})
    return events, series, {"kpi": kpi}


def test_failed_results_swap_keeps_the_previous_results(tmp_path, monkeypatch):
    archive = Archive(tmp_path / "data")
    out = _run(tmp_path, archive)
    archive.write_results(out.run_id, *_results(1))
    import analysis.archive.store as archive_mod

    real = archive_mod.os.rename

    def failing(src, dst):
        # The new results moving into the run folder (after the old ones moved out).
        if Path(src).name == "results" and Path(src).parent.parent.name == "staging":
            raise OSError("disk error (simulated)")
        return real(src, dst)

    monkeypatch.setattr(archive_mod.os, "rename", failing)
    with pytest.raises(OSError, match="simulated"):
        archive.write_results(out.run_id, *_results(2))
    monkeypatch.undo()
    # The previous analysis is still there, whole; nothing is left in staging.
    _, summary = archive.read_results(out.run_id)
    assert summary == {"kpi": 1}
    assert archive.list_runs()[0]["analysed"] is True
    assert list((archive.root / "staging").iterdir()) == []


def test_failed_catalog_update_leaves_meta_as_before(tmp_path, monkeypatch):
    archive = Archive(tmp_path / "data")
    out = _run(tmp_path, archive, tags=["x"])
    before = _snapshot(archive)

    def failing(meta):
        raise sqlite3.OperationalError("database is locked (simulated)")

    monkeypatch.setattr(archive, "_upsert_row", failing)
    with pytest.raises(sqlite3.OperationalError, match="simulated"):
        archive.update_meta(out.run_id, name="renamed", tags=["z"])
    monkeypatch.undo()
    # meta.json (the truth) and the catalog still agree: the change was not made.
    assert _snapshot(archive) == before
    assert archive.get_meta(out.run_id).get("name") != "renamed"
    assert [r["run_id"] for r in archive.list_runs(tag="x")] == [out.run_id]


def test_failed_catalog_row_at_commit_stores_nothing(tmp_path, monkeypatch):
    archive = Archive(tmp_path / "data")
    _run(tmp_path, archive, "first")
    before = _snapshot(archive)

    def failing(meta):
        raise sqlite3.OperationalError("database is locked (simulated)")

    monkeypatch.setattr(archive, "_upsert_row", failing)
    with pytest.raises(sqlite3.OperationalError, match="simulated"):
        _run(tmp_path, archive, "second", n=500)
    monkeypatch.undo()
    assert _snapshot(archive) == before


def test_an_id_taken_meanwhile_by_another_ingest_gives_a_longer_id(tmp_path, monkeypatch):
    import analysis.archive.store as archive_mod

    archive = Archive(tmp_path / "data")
    first = _run(tmp_path, archive, "first")
    taken: list[Path] = []
    real_write_json = archive_mod.write_json

    def racing(path, data):
        # Another process commits a run under the same id between the check and the rename.
        if data.get("run_id") and not taken:
            other = archive.root / "runs" / data["run_id"]
            other.mkdir()
            (other / "meta.json").write_text("{}")
            taken.append(other)
        return real_write_json(path, data)

    monkeypatch.setattr(archive_mod, "write_json", racing)
    second = _run(tmp_path, archive, "second", n=500)
    monkeypatch.undo()
    assert taken and second.run_id != taken[0].name
    assert second.run_id.startswith(taken[0].name)  # same stamp, longer digest
    assert (taken[0] / "meta.json").read_text() == "{}"  # the other run is untouched
    assert archive.get_meta(second.run_id)["run_id"] == second.run_id
    assert first.run_id in {r["run_id"] for r in archive.list_runs()}


def test_stale_analysed_flag_is_repaired_on_open(tmp_path):
    archive = Archive(tmp_path / "data")
    out = _run(tmp_path, archive)
    archive.write_results(out.run_id, *_results(1))
    # Killed between storing the results and updating the catalog row:
    with sqlite3.connect(archive.root / "catalog.sqlite") as con:
        con.execute("UPDATE runs SET analysed = 0")
    assert [r["analysed"] for r in Archive(archive.root).list_runs()] == [True]


def test_failed_catalog_delete_keeps_the_run_whole(tmp_path, monkeypatch):
    archive = Archive(tmp_path / "data")
    out = _run(tmp_path, archive)
    before = _snapshot(archive)

    def failing(run_id):
        raise sqlite3.OperationalError("database is locked (simulated)")

    monkeypatch.setattr(archive, "_delete_row", failing)
    with pytest.raises(sqlite3.OperationalError, match="simulated"):
        archive.delete_run(out.run_id)
    monkeypatch.undo()
    assert _snapshot(archive) == before
    assert archive.get_meta(out.run_id)["run_id"] == out.run_id
