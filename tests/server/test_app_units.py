"""The page's units: angles in degrees in series, chart plan, limit lines, KPIs, event peaks."""

from __future__ import annotations

import pint
import pytest
from fastapi.testclient import TestClient

from analysis import catalogue as cat
from tests.server.dashboard_fixtures import Stocked

#: An independent pint registry: expected values never come from the code under test.
UREG = pint.UnitRegistry()
RAD_TO_DEG = UREG.Quantity(1.0, "rad").to("deg").magnitude


def _rows(plan: dict) -> dict[str, dict]:
    return {row["label"]: row for panel in plan["panels"] for row in panel["rows"]}


def test_series_come_in_degrees_and_si_on_request(client: TestClient, stocked: Stocked) -> None:
    names = f"{cat.ROLL},{cat.ROLL_RATE},{cat.VEL_X}"
    url = f"/api/runs/{stocked.planted_id}/series"
    shown = client.get(url, params={"signals": names, "t0": 5.0, "t1": 6.0}).json()
    si = client.get(url, params={"signals": names, "t0": 5.0, "t1": 6.0, "units": "si"}).json()
    assert shown["units"] == "display" and si["units"] == "si"
    assert shown["signals"][cat.ROLL]["unit"] == "deg"
    assert shown["signals"][cat.ROLL_RATE]["unit"] == "deg/s"
    assert si["signals"][cat.ROLL]["unit"] == "rad"
    assert si["signals"][cat.VEL_X]["unit"] == shown["signals"][cat.VEL_X]["unit"] == "m/s"
    assert shown["signals"][cat.VEL_X]["y"] == si["signals"][cat.VEL_X]["y"]
    for name in (cat.ROLL, cat.ROLL_RATE):
        assert shown["signals"][name]["t"] == si["signals"][name]["t"]
        expected = [v * RAD_TO_DEG for v in si["signals"][name]["y"]]
        # Values are sent with 6 significant digits of the series' largest magnitude
        # (json_values), in each unit: 1e-5 of that magnitude covers both roundings.
        tol = 1e-5 * max(abs(v) for v in expected)
        # Reference library: pint (rad -> deg, rad/s -> deg/s, same factor).
        assert shown["signals"][name]["y"] == pytest.approx(expected, rel=0, abs=tol)
    # The planted roll is 0.05 sin(0.5 t) rad: its largest value, 0.05 rad, is 2.865 deg
    # (input of the fixture; conversion by pint).
    whole = client.get(url, params={"signals": cat.ROLL}).json()["signals"][cat.ROLL]
    peak = max(v for v in whole["y"] if v is not None)
    assert peak == pytest.approx(0.05 * RAD_TO_DEG, rel=1e-4)


def test_unknown_unit_system_is_refused(client: TestClient, stocked: Stocked) -> None:
    response = client.get(
        f"/api/runs/{stocked.planted_id}/series", params={"signals": cat.ROLL, "units": "imperial"}
    )
    assert response.status_code == 400
    assert "units" in response.json()["detail"]


def test_chart_plan_declares_shown_units_and_limit_lines_in_them(
    client: TestClient, stocked: Stocked
) -> None:
    plan = client.get(f"/api/runs/{stocked.demo_id}/charts").json()
    assert plan["units"] == "display"
    rows = _rows(plan)
    assert rows["roll"]["unit"] == "deg"
    assert rows["roll error"]["unit"] == "deg"
    assert rows["pitch"]["unit"] == "deg"
    assert rows["yaw rate"]["unit"] == "deg/s"
    roll_trace = next(t for t in rows["roll"]["traces"] if t["signal"] == cat.ROLL)
    assert (roll_trace["unit"], roll_trace["si_unit"]) == ("deg", "rad")
    assert "deg" not in rows["tip-over margin"]["unit"]
    thresholds = client.get(f"/api/runs/{stocked.demo_id}").json()["analysis"]["thresholds"]
    # The thresholds are stored in file units (roll_band_deg, pitch_limit_deg): the lines
    # drawn on degree axes must show those very numbers (rel 1e-9: two float conversions).
    band = rows["roll error"]["lines"][0]
    assert band["y"] == pytest.approx(thresholds["roll_band_deg"], rel=1e-9)
    limit = rows["pitch"]["lines"][0]
    assert limit["y"] == pytest.approx(thresholds["pitch_limit_deg"], rel=1e-9)


def test_kpis_and_event_peaks_are_shown_in_degrees(client: TestClient, stocked: Stocked) -> None:
    body = client.get(f"/api/runs/{stocked.demo_id}").json()
    rms_rad = body["headline"]["roll_error_rms"]
    shown = body["headline_shown"]["roll_error_rms"]
    assert shown["unit"] == "deg"
    # Reference library: pint.
    assert shown["value"] == pytest.approx(rms_rad * RAD_TO_DEG, rel=1e-12)
    roll_events = [e for e in body["analysis"]["events"] if e["detail"].get("unit") == "rad"]
    assert roll_events, "the demo run has roll-tracking events"
    for event in roll_events:
        assert event["shown"]["unit"] == "deg"
        # Reference library: pint.
        assert event["shown"]["peak"] == pytest.approx(event["peak"] * RAD_TO_DEG, rel=1e-12)
    others = [e for e in body["analysis"]["events"] if e["detail"].get("unit") == "N*m"]
    assert all(e["shown"] == {"peak": e["peak"], "unit": "N*m"} for e in others)
    listed = {r["run_id"]: r for r in client.get("/api/runs").json()["runs"]}
    assert listed[stocked.demo_id]["kpis_shown"] == body["headline_shown"]
