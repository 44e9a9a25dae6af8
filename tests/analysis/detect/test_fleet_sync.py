"""Fleet tables follow the stored results, also after an analysis stopped half-way."""

from __future__ import annotations

import dataclasses
from pathlib import Path

import pytest

import analysis.detect.pipeline as pipeline
from analysis.archive.fleet import fleet_stamp, read_fleet, write_fleet_rows
from analysis.archive.store import Archive
from analysis.detect.pipeline import analyse_run, sync_fleet
from analysis.ingest.stream import ingest_files

DEMO = Path(__file__).resolve().parents[3] / "demo_logs"


@pytest.fixture()
def analysed(tmp_path):
    archive = Archive(tmp_path / "data")
    name = "loop-lean14-a"
    files = [DEMO / f"{name}_state.csv.gz", DEMO / f"{name}_torque.csv.gz"]
    run_id = ingest_files(archive, files, DEMO / "channel-map.toml", DEMO / "marram-2.toml").run_id
    first = analyse_run(archive, run_id)
    return archive, run_id, first


def _kinds(frame):
    return frame.groupby("kind").size().to_dict() if len(frame) else {}


def test_rows_written_by_the_analysis_are_in_sync(analysed):
    archive, run_id, _ = analysed
    assert fleet_stamp(archive.root, run_id) is not None
    assert sync_fleet(archive) == []


def test_rows_left_stale_by_an_interrupted_analysis_are_rewritten(analysed, monkeypatch):
    archive, run_id, first = analysed
    th = archive.load_profile(run_id).thresholds
    # A much higher low-margin threshold: far more time counts as low margin.
    stricter = dataclasses.replace(th, tip_margin_on=0.9, tip_margin_off=0.95)

    def crash(*args, **kwargs):
        raise KeyboardInterrupt("stopped between the results and the fleet rows (simulated)")

    monkeypatch.setattr(pipeline, "write_fleet_rows", crash)
    with pytest.raises(KeyboardInterrupt):
        analyse_run(archive, run_id, stricter)
    monkeypatch.undo()
    stored_events, summary = archive.read_results(run_id)
    assert _kinds(stored_events) != _kinds(read_fleet(archive.root, "events"))  # stale
    assert sync_fleet(archive) == [run_id]
    events = read_fleet(archive.root, "events")
    assert _kinds(events.drop(columns="run_id")) == _kinds(stored_events)
    kpis = read_fleet(archive.root, "kpis")
    tip = kpis[(kpis["detector"] == "tip") & (kpis["kpi"] == "time_below_s")]["value"]
    assert list(tip) == [pytest.approx(summary["kpis"]["tip"]["time_below_s"])]
    assert sync_fleet(archive) == []


def test_rows_of_a_run_that_is_gone_are_removed(analysed):
    archive, run_id, first = analysed
    events, summary = archive.read_results(run_id)
    write_fleet_rows(archive.root, "20990101-0000-dead00", {}, events, summary["kpis"], "x")
    assert sync_fleet(archive) == ["20990101-0000-dead00"]
    assert set(read_fleet(archive.root, "events")["run_id"]) == {run_id}
