"""API tests of the compare routes (server.api.compare) on stored demo runs."""

from __future__ import annotations

from collections.abc import Iterator

import pytest
from fastapi.testclient import TestClient

from server.app import create_app
from tests.server.compare_archive import CompareArchive, stock


@pytest.fixture(scope="module")
def stocked_compare(tmp_path_factory: pytest.TempPathFactory) -> CompareArchive:
    return stock(tmp_path_factory.mktemp("compare"))


@pytest.fixture(scope="module")
def api(stocked_compare: CompareArchive) -> Iterator[TestClient]:
    with TestClient(create_app(stocked_compare.root), raise_server_exceptions=False) as c:
        yield c


def test_compare_page_is_offered(api) -> None:
    assert "compare" in api.get("/api/info").json()["features"]["pages"]
    assert api.get("/compare.html").status_code == 200


def test_compare_same_course(api, stocked_compare) -> None:
    s = stocked_compare
    r = api.get("/api/compare", params={"a": s.a, "b": s.b, "n_boot": 300})
    assert r.status_code == 200, r.text
    comp, charts = r.json()["comparison"], r.json()["charts"]
    assert comp["same_course"] is True and comp["refusal"] is None
    assert [x["run"] for x in comp["runs_a"]] == [s.a]
    keys = {row["key"] for row in comp["kpis"]}
    assert {
        "roll_error_rms",
        "min_tip_margin",
        "wheel_l.saturation_share",
        "wheel_l.energy",
    } <= keys
    assert set(comp["segment_kpis"]) == {seg["name"] for seg in comp["segments"]}
    # Every row says what it rests on; one run each is within-run spread only.
    rows = {row["key"]: row for row in comp["kpis"]}
    assert rows["roll_error_rms"]["basis"].startswith("1 run per version: within-run spread only")
    assert rows["min_tip_margin"]["indicative"] is True
    assert rows["min_tip_margin"]["verdict"] == "no verdict"
    assert comp["settings"]["fdr_q"] == 0.05
    assert any("pseudo-replication" in n for n in comp["notes"])
    assert {t["version"] for t in charts["traces"]} == {"A", "B"}
    assert charts["segments"] == comp["segments"]


def test_compare_other_course_is_refused_per_segment(api, stocked_compare) -> None:
    s = stocked_compare
    r = api.get("/api/compare", params={"a": s.a, "b": s.hill, "n_boot": 300})
    assert r.status_code == 200, r.text
    comp = r.json()["comparison"]
    assert comp["same_course"] is False
    assert "different courses" in comp["refusal"]
    assert comp["segment_kpis"] == {} and comp["kpis"]


def test_candidates_same_course_first(api, stocked_compare) -> None:
    s = stocked_compare
    r = api.get("/api/compare/candidates", params={"run": s.a})
    assert r.status_code == 200, r.text
    body = r.json()
    assert [x["run_id"] for x in body["same_course"]] == [s.b]
    assert [x["run_id"] for x in body["other"]] == [s.hill]


def test_report_download(api, stocked_compare) -> None:
    s = stocked_compare
    r = api.get("/api/compare/report", params={"a": s.a, "b": s.b, "n_boot": 300})
    assert r.status_code == 200
    assert "attachment" in r.headers["content-disposition"]
    assert r.text.startswith("<!doctype html>")
    assert "&lt;b&gt;old&lt;/b&gt;" in r.text and "<b>old</b>" not in r.text


@pytest.mark.parametrize(
    ("params", "status", "message"),
    [
        ({"a": "nope", "b": "nope"}, 404, "nope"),
        ({"b": "x"}, 400, "a"),
        ({"a": "x", "b": "y", "marks": "ten,20"}, 400, "marks must be metres"),
        ({"a": "x", "b": "y", "n_boot": 5}, 400, "n_boot must be between"),
    ],
)
def test_bad_requests(api, params, status, message) -> None:
    r = api.get("/api/compare", params=params)
    assert r.status_code == status
    assert message in r.json()["detail"]


def test_compare_is_shown_in_deg_and_percent_and_si_on_request(api, stocked_compare) -> None:
    import pint

    s = stocked_compare
    params = {"a": s.a, "b": s.b, "n_boot": 300}
    shown = api.get("/api/compare", params=params).json()
    si = api.get("/api/compare", params={**params, "units": "si"}).json()
    assert shown["comparison"]["units"] == "display" and si["comparison"]["units"] == "si"
    rows = {r["key"]: r for r in shown["comparison"]["kpis"]}
    rows_si = {r["key"]: r for r in si["comparison"]["kpis"]}
    assert rows["roll_error_rms"]["unit"] == "deg" and rows_si["roll_error_rms"]["unit"] == "rad"
    assert rows["wheel_l.saturation_share"]["unit"] == "%"
    assert rows_si["wheel_l.saturation_share"]["unit"] == "-"
    # Reference library: pint (rad -> deg); both sides carry 6 significant digits.
    deg = pint.UnitRegistry().Quantity(rows_si["roll_error_rms"]["a"], "rad").to("deg").magnitude
    assert rows["roll_error_rms"]["a"] == pytest.approx(deg, rel=2e-6)
    sig = {x["name"]: x for x in shown["charts"]["signals"]}
    assert sig["roll_error"]["unit"] == "deg"
    assert {x["name"]: x for x in si["charts"]["signals"]}["roll_error"]["unit"] == "rad"
    bad = api.get("/api/compare", params={**params, "units": "imperial"})
    assert bad.status_code == 400
