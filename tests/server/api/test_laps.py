"""API of multi-lap runs: laps in the run's JSON (shown units) and in the comparison."""

from __future__ import annotations

from collections.abc import Iterator

import pytest
from fastapi.testclient import TestClient

from server.app import create_app
from tests.server.lap_archive import LapArchive, stock_laps


@pytest.fixture(scope="module")
def lap_api(tmp_path_factory: pytest.TempPathFactory) -> Iterator[tuple[TestClient, LapArchive]]:
    stocked = stock_laps(tmp_path_factory.mktemp("lap-api"))
    with TestClient(create_app(stocked.root), raise_server_exceptions=False) as c:
        yield c, stocked


def test_run_carries_its_laps_in_si_and_in_shown_units(lap_api) -> None:
    api, s = lap_api
    body = api.get(f"/api/runs/{s.b}").json()
    stored = body["analysis"]["laps"]
    shown = body["laps_shown"]
    assert len(stored["laps"]) == len(shown["laps"]) == 8
    units = {d["key"]: d["unit"] for d in shown["kpi_defs"]}
    assert units["roll_error_rms"] == "deg" and units["lap_time"] == "s"
    si = stored["kpis"][0]["roll_error_rms"]
    # pint: 1 rad = 180/pi deg
    assert shown["kpis"][0]["roll_error_rms"] == pytest.approx(si * 180.0 / 3.141592653589793)
    assert shown["drift"]["lap_time"]["verdict"] == "worse"


def test_compare_api_goes_lap_by_lap(lap_api) -> None:
    api, s = lap_api
    r = api.get("/api/compare", params={"a": s.a, "b": s.b, "n_boot": 300})
    assert r.status_code == 200, r.text
    comp = r.json()["comparison"]
    assert comp["settings"]["resampling"] == "whole laps, each version's laps pooled"
    assert len(comp["laps"]["by_lap"]) == 8
    assert comp["laps"]["runs"][s.b]["drift"]["lap_time"]["verdict"] == "worse"


def test_compare_api_gives_the_lap_table_in_shown_units(lap_api) -> None:
    api, s = lap_api
    body = api.get("/api/compare", params={"a": s.a, "b": s.b, "n_boot": 300}).json()
    shown, si = body["laps_shown"], body["comparison"]["laps"]
    units = {d["key"]: d["unit"] for d in shown["kpi_defs"]}
    assert units["roll_error_rms"] == "deg"
    a_si = si["by_lap"][0]["kpis"]["roll_error_rms"]["a"]
    # pint: 1 rad = 180/pi deg
    assert shown["by_lap"][0]["kpis"]["roll_error_rms"]["a"] == pytest.approx(
        a_si * 180.0 / 3.141592653589793
    )
