"""Read endpoints of the dashboard API over the session archive (demo + planted run)."""

from __future__ import annotations

import csv
import io
import sys
import types
import zipfile

import numpy as np
import pytest
from fastapi import APIRouter
from fastapi.testclient import TestClient

from analysis import catalogue as cat
from server import app as app_module
from tests.server.dashboard_fixtures import (
    HOLE,
    PLANT_RATE_HZ,
    SPIKE_INDEX,
    SPIKE_NM,
    Stocked,
    fresh_app,
)

CAUTION = "Outrigger reads logs after the fact; it is not a safety system."
HEADLINE_KEYS = {"worst_saturation_share", "slip_events", "min_tip_margin", "roll_error_rms"}


def _error(response) -> dict:
    body = response.json()
    assert set(body) == {"error"}, body
    assert set(body["error"]) == {"type", "message"}
    return body["error"]


# --- runs ----------------------------------------------------------------------------


def test_list_runs_has_both_runs_with_headline_kpis(client: TestClient, stocked: Stocked) -> None:
    body = client.get("/api/runs").json()
    by_id = {r["run_id"]: r for r in body["runs"]}
    assert set(by_id) == {stocked.demo_id, stocked.planted_id}
    demo = by_id[stocked.demo_id]
    assert demo["course"] == "gullhaven-loop"
    assert demo["controller"] == "lean-ctl-a"
    assert demo["tags"] == ["demo", "dry"]
    assert demo["duration_s"] > 0 and demo["distance_m"] > 0
    assert set(demo["kpis"]) == HEADLINE_KEYS


@pytest.mark.parametrize(
    ("query", "expected"),
    [
        ({"course": "gullhaven-loop"}, "demo"),
        ({"tag": "planted"}, "planted"),
        ({"controller": "lean-ctl-a"}, "demo"),
        ({"course": "no-such-course"}, None),
    ],
)
def test_list_runs_filters(client: TestClient, stocked: Stocked, query, expected) -> None:
    ids = [r["run_id"] for r in client.get("/api/runs", params=query).json()["runs"]]
    want = {"demo": [stocked.demo_id], "planted": [stocked.planted_id], None: []}[expected]
    assert ids == want


def test_list_runs_date_filter(client: TestClient, stocked: Stocked) -> None:
    planted_date = client.get(f"/api/runs/{stocked.planted_id}").json()["run"]["date"]
    day = planted_date[:10]
    ids = [r["run_id"] for r in client.get("/api/runs", params={"date_from": day}).json()["runs"]]
    assert stocked.planted_id in ids
    before = client.get("/api/runs", params={"date_to": "1999-12-31"}).json()["runs"]
    assert before == []


def test_one_run_has_meta_ingest_report_kpis_events_and_skipped(
    client: TestClient, stocked: Stocked
) -> None:
    body = client.get(f"/api/runs/{stocked.demo_id}").json()
    assert body["run"]["run_id"] == stocked.demo_id
    assert body["run"]["ingest_report"]
    analysis = body["analysis"]
    assert {"kpis", "events", "skipped", "thresholds", "analysis_version"} <= set(analysis)
    assert isinstance(analysis["skipped"], list)
    assert analysis["events"], "the demo run has planted events"
    event = analysis["events"][0]
    assert {"kind", "channel", "start_s", "end_s", "duration_s", "peak", "detail"} <= set(event)
    assert event["kind"] in cat.EVENT_KINDS
    assert set(body["headline"]) == HEADLINE_KEYS


def test_unknown_run_is_404_with_the_error_shape(client: TestClient) -> None:
    response = client.get("/api/runs/no-such-run")
    assert response.status_code == 404
    error = _error(response)
    assert error["type"] == "RunNotFoundError"
    assert "no-such-run" in error["message"]


# --- charts and series -------------------------------------------------------------------


def test_chart_plan_draws_every_timeline_for_the_demo_run(
    client: TestClient, stocked: Stocked
) -> None:
    body = client.get(f"/api/runs/{stocked.demo_id}/charts").json()
    panels = {p["id"]: p for p in body["panels"]}
    assert list(panels) == ["torque", "wheels", "roll", "tip", "balance"]
    for panel in panels.values():
        assert panel["rows"], f"{panel['id']}: {panel['empty_reason']}"
    available = set(body["signals"]["frame"]) | set(body["signals"]["derived"])
    drawn = {t["signal"] for p in panels.values() for r in p["rows"] for t in r["traces"]}
    assert drawn <= available
    assert cat.TIP_MARGIN in drawn and cat.ROLL in drawn
    tip_lines = panels["tip"]["rows"][0]["lines"]
    # Default low-margin threshold from THRESHOLD_SPECS (common practice, no source).
    assert tip_lines[0]["y"] == pytest.approx(0.3)


def test_series_of_all_drawn_signals_respects_the_budget(
    client: TestClient, stocked: Stocked
) -> None:
    plan = client.get(f"/api/runs/{stocked.demo_id}/charts").json()
    signals = sorted({t["signal"] for p in plan["panels"] for r in p["rows"] for t in r["traces"]})
    response = client.get(
        f"/api/runs/{stocked.demo_id}/series", params={"signals": ",".join(signals), "points": 300}
    )
    assert response.status_code == 200, response.text
    body = response.json()
    assert set(body["signals"]) == set(signals)
    for name, s in body["signals"].items():
        assert s["downsampled"], name  # 90 s at 200 or 100 Hz is far more than 300 samples
        assert len(s["t"]) == len(s["y"])
        gaps = sum(v is None for v in s["y"])
        assert len(s["t"]) - gaps <= 300, name
        assert body["t0"] <= s["t"][0] and s["t"][-1] <= body["t1"]


def test_spike_survives_the_default_budget(client: TestClient, stocked: Stocked) -> None:
    name = cat.actuator_signal("wheel_l", cat.TORQUE_CMD)
    body = client.get(
        f"/api/runs/{stocked.planted_id}/series", params={"signals": name, "points": 100}
    ).json()
    s = body["signals"][name]
    assert s["downsampled"]
    assert max(v for v in s["y"] if v is not None) == pytest.approx(SPIKE_NM, abs=1e-5)
    assert SPIKE_INDEX / PLANT_RATE_HZ in s["t"]


def test_zoomed_window_comes_back_at_full_resolution(client: TestClient, stocked: Stocked) -> None:
    body = client.get(
        f"/api/runs/{stocked.planted_id}/series",
        params={"signals": cat.ROLL, "t0": 5.0, "t1": 6.0, "points": 2000},
    ).json()
    s = body["signals"][cat.ROLL]
    assert not s["downsampled"]
    # 100 Hz, both ends inclusive: 101 samples from 5.00 to 6.00 s.
    assert s["samples"] == 101
    assert s["t"] == pytest.approx(list(np.arange(500, 601) / PLANT_RATE_HZ), abs=1e-4)


def test_hole_in_the_time_stamps_is_a_null(client: TestClient, stocked: Stocked) -> None:
    body = client.get(
        f"/api/runs/{stocked.planted_id}/series",
        params={"signals": cat.PITCH, "t0": 19.0, "t1": 22.0},
    ).json()
    s = body["signals"][cat.PITCH]
    nulls = [t for t, v in zip(s["t"], s["y"], strict=True) if v is None]
    assert len(nulls) == 1
    assert (HOLE[0] - 1) / PLANT_RATE_HZ < nulls[0] < HOLE[1] / PLANT_RATE_HZ


def test_derived_series_are_served_like_frame_columns(client: TestClient, stocked: Stocked) -> None:
    name = f"wheel_l.{cat.TORQUE_AVAILABLE}"
    body = client.get(
        f"/api/runs/{stocked.planted_id}/series", params={"signals": f"{cat.ROLL},{name}"}
    ).json()
    assert set(body["signals"]) == {cat.ROLL, name}
    values = [v for v in body["signals"][name]["y"] if v is not None]
    # Without motor constants the available torque is the peak torque (by construction: the
    # profile then gives only the peak rating, no torque-speed line);
    # the demo profile gives wheel_l peak_torque_nm = 3.0 (input, not computed here).
    assert min(values) == max(values) == pytest.approx(3.0)


@pytest.mark.parametrize(
    ("params", "message"),
    [
        ({"signals": "roll,bogus_signal"}, "has no signal bogus_signal"),
        ({"signals": ""}, "Name at least one signal"),
        ({"signals": "roll", "t0": 5, "t1": 5}, "must be after its start"),
        ({"signals": "roll", "points": 3}, "points must be between"),
    ],
)
def test_series_bad_requests(client: TestClient, stocked: Stocked, params, message) -> None:
    response = client.get(f"/api/runs/{stocked.planted_id}/series", params=params)
    assert response.status_code == 400
    assert message in _error(response)["message"]


# --- downloads --------------------------------------------------------------------------


def test_events_csv(client: TestClient, stocked: Stocked) -> None:
    response = client.get(f"/api/runs/{stocked.demo_id}/events.csv")
    assert response.status_code == 200
    assert response.headers["content-type"].startswith("text/csv")
    assert "attachment" in response.headers["content-disposition"]
    rows = list(csv.DictReader(io.StringIO(response.text)))
    events = client.get(f"/api/runs/{stocked.demo_id}").json()["analysis"]["events"]
    assert len(rows) == len(events)
    assert list(rows[0]) == [
        "kind",
        "channel",
        "start_s",
        "end_s",
        "duration_s",
        "peak",
        "unit",
        "detail",
    ]
    assert float(rows[0]["start_s"]) == pytest.approx(events[0]["start_s"])


def test_run_zip_holds_the_parquet_files_and_meta(client: TestClient, stocked: Stocked) -> None:
    response = client.get(f"/api/runs/{stocked.demo_id}/files.zip")
    assert response.status_code == 200
    assert response.headers["content-type"] == "application/zip"
    with zipfile.ZipFile(io.BytesIO(response.content)) as zf:
        names = zf.namelist()
        assert zf.testzip() is None
    assert f"{stocked.demo_id}/meta.json" in names
    assert any(n.endswith(".parquet") and "streams" in n for n in names)
    assert all(n.startswith(f"{stocked.demo_id}/") for n in names)


# --- pages, plotly, OpenAPI, optional routers ----------------------------------------------


@pytest.mark.parametrize("page", ["/", "/upload.html", "/run.html"])
def test_pages_have_the_caution_and_no_remote_scripts(client: TestClient, page: str) -> None:
    html = client.get(page).text
    assert CAUTION in html
    assert "http://" not in html and "https://" not in html
    assert 'data-optional-page="compare"' in html


def test_plotly_is_served_from_the_python_package(client: TestClient) -> None:
    response = client.get(app_module.PLOTLY_URL)
    assert response.status_code == 200
    assert response.content == app_module.plotly_js_path().read_bytes()
    # The Compare page draws with it; the Run page draws with its own canvas charts.
    assert app_module.PLOTLY_URL in client.get("/compare.html").text
    run_page = client.get("/run.html").text
    assert app_module.PLOTLY_URL not in run_page and "/js/stripchart.js" in run_page


def test_openapi_documents_the_api(client: TestClient) -> None:
    paths = client.get("/openapi.json").json()["paths"]
    for path in (
        "/api/runs",
        "/api/runs/{run_id}",
        "/api/runs/{run_id}/series",
        "/api/runs/{run_id}/events.csv",
        "/api/runs/{run_id}/files.zip",
        "/api/upload",
        "/api/jobs/{job_id}",
        "/api/runs/{run_id}/analyse",
    ):
        assert path in paths


def test_optional_router_is_included_when_it_imports(
    stocked: Stocked, monkeypatch: pytest.MonkeyPatch
) -> None:
    fake = types.ModuleType("server.api.fakepage")
    fake.router = APIRouter()  # type: ignore[attr-defined]

    @fake.router.get("/api/fakepage")  # type: ignore[attr-defined]
    def _hello() -> dict:
        return {"hello": "fake"}

    monkeypatch.setitem(sys.modules, "server.api.fakepage", fake)
    monkeypatch.setattr(
        app_module, "OPTIONAL_ROUTERS", ("server.api.fakepage", "server.api.absent")
    )
    with fresh_app(stocked.root) as c:
        assert c.get("/api/fakepage").json() == {"hello": "fake"}
        assert "fakepage" in c.get("/api/info").json()["features"]["pages"]


def test_unusable_archive_folder_is_refused_at_startup(tmp_path) -> None:
    from analysis.errors import ArchiveError

    blocker = tmp_path / "a-file"
    blocker.write_text("not a folder")
    with pytest.raises(ArchiveError, match="cannot be created or used"):
        app_module.create_app(blocker)


def test_internal_error_is_a_generic_500_and_the_server_goes_on(
    stocked: Stocked, monkeypatch: pytest.MonkeyPatch
) -> None:
    from analysis.archive.store import Archive

    def broken(self, **kwargs):
        raise RuntimeError("secret internal detail")

    with fresh_app(stocked.root) as c:
        monkeypatch.setattr(Archive, "list_runs", broken)
        response = c.get("/api/runs")
        assert response.status_code == 500
        error = _error(response)
        assert error["type"] == "InternalError"
        assert "secret internal detail" not in response.text
        assert "Traceback" not in response.text
        monkeypatch.undo()
        assert c.get("/api/runs").status_code == 200
