"""API tests of the Run page pictures on the stocked demo archive (real app, in process)."""

from __future__ import annotations

import json
import math
from collections.abc import Iterator

import numpy as np
import pytest
from fastapi.testclient import TestClient

from analysis.archive.store import Archive
from tests.server.dashboard_fixtures import Stocked, fresh_app, spy_load_frame


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


@pytest.fixture(scope="module")
def grouped_client(grouped: Stocked) -> Iterator[TestClient]:
    with fresh_app(grouped.root) as c:
        yield c


def test_row_group_starts_are_the_base_streams_first_times(grouped: Stocked) -> None:
    for run_id in (grouped.demo_id, grouped.planted_id):
        archive = Archive(grouped.root)
        t = archive.load_frame(run_id, columns=[])["t"].to_numpy()
        starts = archive.row_group_starts(run_id)
        assert starts is not None
        firsts, rows = starts
        assert len(firsts) > 2 and int(rows.sum()) == len(t)
        assert firsts.tolist() == t[np.r_[0, np.cumsum(rows)[:-1]]].tolist()


@pytest.mark.parametrize("window_rows", [None, 997, 4099])
@pytest.mark.parametrize("cuts", ["footer", "times"])
@pytest.mark.parametrize("which", ["demo", "planted"])
def test_pictures_read_only_their_columns_and_match_the_whole_frame(
    grouped: Stocked,
    grouped_client: TestClient,
    monkeypatch: pytest.MonkeyPatch,
    window_rows: int | None,
    cuts: str,
    which: str,
) -> None:
    """An eight-hour run's whole frame is gigabytes: each picture reads the columns it
    draws, window after window, and gives what its computation gives on the whole frame
    (small windows: odd cuts, through events, the planted run's hole and saturations;
    cut at row groups from the file's footer, or at every n-th time read)."""
    from analysis.detect import pictures
    from analysis.detect.calibrate import calibrate
    from analysis.detect.course_map import course_path, thin_indices
    from analysis.detect.envelope import actuator_envelope

    run_id = grouped.demo_id if which == "demo" else grouped.planted_id
    archive = Archive(grouped.root)
    whole = archive.load_frame(run_id)
    profile = archive.load_profile(run_id)
    if window_rows is not None:
        monkeypatch.setattr(pictures, "WINDOW_ROWS", window_rows)
    if cuts == "times":  # as in an object store: no footer statistics at hand
        monkeypatch.setattr(Archive, "row_group_starts", lambda self, run_id: None)
        # and the envelope's second pass read again, as for a long run
        monkeypatch.setattr(pictures, "HOLD_BYTES", 0)
    asked = spy_load_frame(monkeypatch)
    client = grouped_client
    body = client.get(f"/api/runs/{run_id}/course-map?colour=speed").json()
    path = course_path(whole, profile)
    assert path is not None
    idx = thin_indices(len(path.t))
    # The page's numbers carry 6 significant digits (pictures._finite_list); running
    # sums added in parts differ from one pass in the last bits only.
    assert body["t"] == pytest.approx(path.t[idx].tolist(), rel=1e-5, abs=1e-9)
    assert body["x"] == pytest.approx(path.x[idx].tolist(), rel=1e-5, abs=1e-9)
    assert body["y"] == pytest.approx(path.y[idx].tolist(), rel=1e-5, abs=1e-9)
    assert body["value"] == pytest.approx(whole["vel_x"].to_numpy()[idx].tolist(), rel=1e-3)
    assert body["length_m"] == pytest.approx(float(path.distance[-1]), rel=1e-12)
    starts = archive.read_results(run_id)[0]["start_s"].to_numpy(dtype=float)
    assert len(body["events"]) == len(starts) > 0
    assert [e["x"] for e in body["events"]] == pytest.approx(
        np.interp(starts, path.t, path.x).tolist(), rel=1e-9, abs=1e-9
    )
    tip = client.get(f"/api/runs/{run_id}/course-map?colour=tip_margin").json()
    margin = archive.read_result_series(run_id, ["tip_margin"])["tip_margin"].to_numpy()
    assert len(margin) == len(whole)  # the derived series lie on the frame's rows
    assert tip["value"] == pytest.approx(margin[idx].tolist(), rel=1e-3, nan_ok=True)
    cal = client.get(f"/api/runs/{run_id}/calibration").json()
    ref_cal = json.loads(json.dumps(calibrate(whole, profile).to_dict()))
    if window_rows is None:  # one window: the very same sums
        assert cal["si"] == ref_cal
    else:  # the means' additions in another order: the last bits
        assert cal["si"]["corrected_profile"] == ref_cal["corrected_profile"]
        assert len(cal["si"]["estimates"]) == len(ref_cal["estimates"]) > 0
        for got, want in zip(cal["si"]["estimates"], ref_cal["estimates"], strict=True):
            if want["estimate"] is not None:
                want = {**want, "estimate": pytest.approx(want["estimate"], rel=1e-12)}
            assert got == want
    marks = 0
    for act in profile.actuator_names:
        env = client.get(f"/api/runs/{run_id}/envelope?actuator={act}").json()
        saturated = archive.read_result_series(run_id, [f"{act}.saturated"])
        ref = actuator_envelope(
            whole,
            profile.actuator(act),
            saturated=saturated[f"{act}.saturated"].to_numpy(dtype=bool),
        )
        if ref is None:
            assert env["available"] is False
            continue
        assert env["samples"] == ref["samples"] > 0
        assert env["saturated_points"] == ref["saturated_points"]
        assert env["share_pct"] == pytest.approx(
            pictures._finite_list(ref["share"].T.ravel() * 100.0, 4)
        )
        marks += len(env["saturated_points"]["speed"])
    if which == "planted":  # its wheels saturate (clipped requests)
        assert marks > 0  # the saturated marks were compared, not only empty lists
    size = window_rows or pictures.WINDOW_ROWS
    if cuts == "footer":  # whole row groups per window
        firsts, rows = archive.row_group_starts(run_id)
        windows = math.ceil(len(firsts) / max(1, size // int(np.median(rows))))
    else:
        windows = math.ceil(len(whole) / size)
    assert (windows > 1) == (window_rows is not None and window_rows < len(whole) // 2)
    # the calibration's reads: consecutive windows, each after the one before
    cal_cols = next(c for c, _, _ in asked if c and "accel_x" in c)
    cal = [(t0, t1) for c, t0, t1 in asked if c == cal_cols]
    assert len(cal) == windows and cal[0][0] is None and cal[-1][1] is None
    assert all(a[1] < b[0] for a, b in zip(cal, cal[1:], strict=False))
    # with cuts from the footer no time column is read; else once per picture
    data = [(cols, t0, t1) for cols, t0, t1 in asked if cols != []]
    time_reads = 3 + len(profile.actuator_names) if cuts == "times" else 0  # two course maps
    assert len(asked) - len(data) == time_reads
    assert all(cols is not None and len(cols) <= 16 for cols, _, _ in data)
    assert len(data) >= 2 * windows  # course map and calibration: every window
    if windows > 1:  # no read of the whole run's rows
        assert all(t0 is not None or t1 is not None for _, t0, t1 in data)
