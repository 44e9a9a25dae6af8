"""API tests of the Run page pictures on the stocked demo archive (real app, in process)."""

from __future__ import annotations

import json
import math

import pytest
from fastapi.testclient import TestClient

from tests.server.dashboard_fixtures import Stocked


def test_course_map_answers_a_path_with_events(client: TestClient, stocked: Stocked) -> None:
    r = client.get(f"/api/runs/{stocked.demo_id}/course-map", params={"colour": "roll_error"})
    assert r.status_code == 200, r.text
    body = r.json()
    assert body["available"] is True and body["value_unit"] == "deg"
    assert len(body["x"]) == len(body["y"]) == len(body["t"]) == len(body["value"])
    assert 0 < len(body["x"]) <= 4000
    # The path length is the integral of |vel_x|: a demo lap of the invented loop is
    # over 100 m long (regression value; the demo course is invented).
    assert body["length_m"] > 100
    assert all(math.isfinite(e["x"]) and math.isfinite(e["y"]) for e in body["events"])
    assert "Dead-reckoned" in body["note"]


def test_course_map_refuses_an_unknown_colour_with_the_choices(
    client: TestClient, stocked: Stocked
) -> None:
    r = client.get(f"/api/runs/{stocked.demo_id}/course-map", params={"colour": "rainbow"})
    assert r.status_code == 400
    assert "tip_margin" in r.text and "rainbow" in r.text


def test_envelope_of_a_window_and_an_unknown_actuator(client: TestClient, stocked: Stocked) -> None:
    whole = client.get(f"/api/runs/{stocked.demo_id}/envelope").json()
    part = client.get(
        f"/api/runs/{stocked.demo_id}/envelope", params={"actuator": "wheel_l", "t0": 10, "t1": 20}
    ).json()
    assert whole["available"] and part["available"]
    assert 0 < part["samples"] < whole["samples"]
    assert sum(v for v in part["share_pct"] if v) == pytest.approx(100.0, rel=1e-3)
    r = client.get(f"/api/runs/{stocked.demo_id}/envelope", params={"actuator": "tail"})
    assert r.status_code == 400 and "wheel_l" in r.text


def test_calibration_of_a_demo_run_agrees_with_its_profile(
    client: TestClient, stocked: Stocked
) -> None:
    r = client.get(f"/api/runs/{stocked.demo_id}/calibration")
    assert r.status_code == 200, r.text
    rows = {row["key"]: row for row in r.json()["estimates"]}
    # The demo logs are generated with the profile's own wheel radius and track width.
    assert rows["wheel_radius"]["differs"] is False
    assert rows["track_width"]["differs"] is False
    assert rows["gyro_bias_yaw"]["unit"] == "deg/s"


def test_pictures_of_an_unknown_run_are_404(client: TestClient) -> None:
    for path in ("course-map", "envelope", "calibration"):
        assert client.get(f"/api/runs/no-such-run/{path}").status_code == 404


def test_calibrate_command_prints_each_check_and_json(stocked: Stocked, capsys) -> None:
    from server.cli.main import main

    assert main(["calibrate", stocked.demo_id, "--data", str(stocked.root)]) == 0
    out = capsys.readouterr().out
    assert "Effective wheel radius" in out and "deg/s" in out and "DIFFERS" not in out
    assert main(["calibrate", stocked.demo_id, "--json", "--data", str(stocked.root)]) == 0
    data = json.loads(capsys.readouterr().out)
    keys = {e["key"] for e in data["estimates"]}
    assert {"wheel_radius", "track_width", "gyro_bias_yaw"} <= keys
    assert data["corrected_profile"] == {}


def test_fleet_trends_per_run_and_per_version(client: TestClient, stocked: Stocked) -> None:
    import statistics

    r = client.get("/api/fleet/trends", params={"kpi": "roll_error_rms"})
    assert r.status_code == 200, r.text
    body = r.json()
    assert body["unit"] == "deg" and body["better"] == "lower"
    ids = {p["run_id"] for p in body["points"]}
    assert stocked.demo_id in ids
    for v in body["versions"]:
        vals = [p["value"] for p in body["points"] if p["version"] == v["version"]]
        # Median as the Python standard library computes it (independent of numpy).
        assert v["median"] == pytest.approx(statistics.median(vals), rel=1e-5)
        assert v["n"] == len(vals) and v["q1"] <= v["median"] <= v["q3"]
    # A shown roll error is in degrees: the stored summary holds radians.
    run = client.get(f"/api/runs/{stocked.demo_id}").json()
    rms_rad = run["analysis"]["kpis"]["roll"]["rms"]
    shown = next(p["value"] for p in body["points"] if p["run_id"] == stocked.demo_id)
    assert shown == pytest.approx(math.degrees(rms_rad), rel=1e-5)


def test_fleet_trends_refuse_an_unknown_kpi_with_the_choices(client: TestClient) -> None:
    r = client.get("/api/fleet/trends", params={"kpi": "happiness"})
    assert r.status_code == 400
    assert "min_tip_margin" in r.text and "happiness" in r.text


def test_pictures_read_only_their_columns_and_match_the_whole_frame(
    client: TestClient, stocked: Stocked, monkeypatch: pytest.MonkeyPatch
) -> None:
    """An eight-hour run's whole frame is gigabytes: each picture reads the columns it
    draws, and gives what its computation gives on the whole frame."""
    from analysis.archive.store import Archive
    from analysis.detect.calibrate import calibrate
    from analysis.detect.course_map import course_path, thin_indices
    from analysis.detect.envelope import actuator_envelope

    archive = Archive(stocked.root)
    whole = archive.load_frame(stocked.demo_id)
    profile = archive.load_profile(stocked.demo_id)
    asked: list[object] = []
    load_frame = Archive.load_frame

    def spy(self, run_id, columns=None, *args, **kwargs):
        asked.append(columns)
        return load_frame(self, run_id, columns, *args, **kwargs)

    monkeypatch.setattr(Archive, "load_frame", spy)
    body = client.get(f"/api/runs/{stocked.demo_id}/course-map").json()
    path = course_path(whole, profile)
    assert path is not None
    idx = thin_indices(len(path.t))
    # The page's numbers carry 6 significant digits (pictures._finite_list).
    assert body["x"] == pytest.approx(path.x[idx].tolist(), rel=1e-5, abs=1e-9)
    assert body["y"] == pytest.approx(path.y[idx].tolist(), rel=1e-5, abs=1e-9)
    cal = client.get(f"/api/runs/{stocked.demo_id}/calibration").json()
    assert cal["si"] == json.loads(json.dumps(calibrate(whole, profile).to_dict()))
    env = client.get(f"/api/runs/{stocked.demo_id}/envelope?actuator=wheel_l").json()
    saturated = archive.read_result_series(stocked.demo_id, ["wheel_l.saturated"])
    ref = actuator_envelope(
        whole,
        profile.actuator("wheel_l"),
        saturated=saturated["wheel_l.saturated"].to_numpy(dtype=bool),
    )
    assert ref is not None and env["samples"] == ref["samples"] > 0
    assert env["saturated_points"] == ref["saturated_points"]
    assert len(asked) == 3 and all(cols is not None and len(cols) <= 16 for cols in asked)
