"""Write endpoints: edit, delete with confirmation, re-analysis, and the write token."""

from __future__ import annotations

import math
from collections.abc import Iterator
from pathlib import Path

import pytest
from fastapi.testclient import TestClient

from analysis import catalogue as cat
from analysis.archive.store import Archive
from tests.server.dashboard_fixtures import (
    RunInputs,
    fresh_app,
    ingest_and_analyse,
    upload_form,
    wait_job,
)

TOKEN = "s3cret-test-token"


@pytest.fixture()
def one_run(tmp_path: Path, planted_inputs: RunInputs) -> tuple[Path, str]:
    root = tmp_path / "archive"
    run_id = ingest_and_analyse(Archive(root), planted_inputs, name="to be edited")
    return root, run_id


@pytest.fixture()
def api(one_run: tuple[Path, str]) -> Iterator[TestClient]:
    with fresh_app(one_run[0]) as c:
        yield c


def _error(response) -> dict:
    body = response.json()
    assert {"type", "title", "status", "detail"} <= set(body), body
    return body


def test_edit_name_notes_and_tags(api: TestClient, one_run: tuple[Path, str]) -> None:
    run_id = one_run[1]
    odd = "<img src=x onerror=alert(1)> & co"
    response = api.patch(
        f"/api/runs/{run_id}", json={"name": odd, "notes": "line 1\nline 2", "tags": [" wet ", "b"]}
    )
    assert response.status_code == 200, response.text
    meta = api.get(f"/api/runs/{run_id}").json()["run"]
    assert meta["name"] == odd  # stored as typed; the pages insert it as text
    assert meta["notes"] == "line 1\nline 2"
    assert meta["tags"] == ["wet", "b"]
    assert [r["run_id"] for r in api.get("/api/runs", params={"tag": "wet"}).json()["runs"]] == [
        run_id
    ]
    # Absent fields stay as they are.
    api.patch(f"/api/runs/{run_id}", json={"notes": "only notes"})
    assert api.get(f"/api/runs/{run_id}").json()["run"]["name"] == odd


def test_edit_rejects_empty_tags_and_wrong_types(api: TestClient, one_run) -> None:
    run_id = one_run[1]
    response = api.patch(f"/api/runs/{run_id}", json={"tags": ["ok", "  "]})
    assert response.status_code == 400
    assert "Tags must be 1 to 64 characters" in _error(response)["detail"]
    response = api.patch(f"/api/runs/{run_id}", json={"tags": "not-a-list"})
    assert response.status_code == 400
    assert "tags" in _error(response)["detail"]


def test_delete_needs_the_run_id_as_confirmation(api: TestClient, one_run) -> None:
    run_id = one_run[1]
    response = api.delete(f"/api/runs/{run_id}")
    assert response.status_code == 400
    message = _error(response)["detail"]
    assert "cannot be undone" in message and f"?confirm={run_id}" in message
    response = api.delete(f"/api/runs/{run_id}", params={"confirm": "something-else"})
    assert response.status_code == 400
    assert api.get(f"/api/runs/{run_id}").status_code == 200
    response = api.delete(f"/api/runs/{run_id}", params={"confirm": run_id})
    assert response.status_code == 200
    assert response.json() == {"deleted": run_id}
    assert api.get(f"/api/runs/{run_id}").status_code == 404
    assert api.get("/api/runs").json()["runs"] == []


def test_delete_of_an_unknown_run_is_404(api: TestClient) -> None:
    response = api.delete("/api/runs/no-such-run", params={"confirm": "no-such-run"})
    assert response.status_code == 404


def test_reanalyse_with_edited_thresholds(api: TestClient, one_run) -> None:
    run_id = one_run[1]
    before = api.get(f"/api/runs/{run_id}").json()["analysis"]
    assert before["thresholds"]["roll_band_deg"] == pytest.approx(3.0)
    assert not [e for e in before["events"] if e["kind"] == cat.ROLL_ERROR]
    # Planted: roll = A sin(wt), roll_ref = A sin(wt - 0.1) with A = 0.05 rad, so
    # |roll_ref - roll| peaks at 2 A sin(0.05) = 0.0049979 rad = 0.28636 deg
    # (sum-to-product identity). A 0.2 deg band is left, a 0.3 deg band is not.
    amplitude = 2 * 0.05 * math.sin(0.05)
    response = api.post(f"/api/runs/{run_id}/analyse", json={"roll_band_deg": 0.2})
    assert response.status_code == 202, response.text
    job = wait_job(api, response.json()["job"]["id"])
    assert job["state"] == "done", job
    after = api.get(f"/api/runs/{run_id}").json()["analysis"]
    assert after["thresholds"]["roll_band_deg"] == pytest.approx(0.2)
    # Keys not sent keep their previous values.
    assert after["thresholds"]["tip_margin_on"] == before["thresholds"]["tip_margin_on"]
    roll_events = [e for e in after["events"] if e["kind"] == cat.ROLL_ERROR]
    assert roll_events
    # Sampled at 100 Hz the peak is missed by at most A (1 - cos(w dt / 2)) ~ 8e-10 rad;
    # 1e-6 rad allows for float32 storage.
    assert max(abs(e["peak"]) for e in roll_events) == pytest.approx(amplitude, abs=1e-6)

    job = wait_job(
        api,
        api.post(f"/api/runs/{run_id}/analyse", json={"roll_band_deg": 0.3}).json()["job"]["id"],
    )
    assert job["state"] == "done", job
    final = api.get(f"/api/runs/{run_id}").json()["analysis"]
    assert not [e for e in final["events"] if e["kind"] == cat.ROLL_ERROR]


@pytest.mark.parametrize(
    ("body", "message"),
    [
        ({"roll_band": 2.0}, "Unknown threshold key(s) roll_band"),
        ({"roll_band_deg": "wide"}, "must be a number"),
        ({"roll_band_deg": -1}, "must be a finite number >= 0"),
        ({"tip_margin_on": 0.9, "tip_margin_off": 0.5}, "tip_margin_on must not exceed"),
    ],
)
def test_reanalyse_validation_errors_are_400(api: TestClient, one_run, body, message) -> None:
    response = api.post(f"/api/runs/{one_run[1]}/analyse", json=body)
    assert response.status_code == 400
    error = _error(response)
    assert error["type"] == "/api.html#problem-thresholds"
    assert message in error["detail"]
    assert api.get("/api/jobs").json()["jobs"] == []


def test_token_protects_writes_and_leaves_reads_open(
    one_run: tuple[Path, str], planted_inputs: RunInputs
) -> None:
    root, run_id = one_run
    parts, fields = upload_form(planted_inputs)
    with fresh_app(root, token=TOKEN) as c:
        assert c.get("/api/runs").status_code == 200
        assert c.get(f"/api/runs/{run_id}/series", params={"signals": "roll"}).status_code == 200
        assert c.get("/api/info").json()["features"]["token_required"] is True

        writes = [
            ("post", "/api/upload", {"files": parts, "data": fields}),
            ("patch", f"/api/runs/{run_id}", {"json": {"name": "x"}}),
            ("delete", f"/api/runs/{run_id}", {"params": {"confirm": run_id}}),
            ("post", f"/api/runs/{run_id}/analyse", {"json": {}}),
            ("put", "/api/configs/map/m", {"content": planted_inputs.map_path.read_bytes()}),
        ]
        for method, url, kwargs in writes:
            response = getattr(c, method)(url, **kwargs)
            assert response.status_code == 401, (method, url, response.text)
            assert response.headers["www-authenticate"] == "Bearer"
            assert "Authorization: Bearer <token>" in _error(response)["detail"]

        wrong = c.patch(
            f"/api/runs/{run_id}", json={"name": "x"}, headers={"Authorization": "Bearer nope"}
        )
        assert wrong.status_code == 401
        assert "does not match" in _error(wrong)["detail"]

        ok = c.patch(
            f"/api/runs/{run_id}",
            json={"name": "renamed"},
            headers={"Authorization": f"Bearer {TOKEN}"},
        )
        assert ok.status_code == 200
        assert c.get(f"/api/runs/{run_id}").json()["run"]["name"] == "renamed"


@pytest.mark.parametrize(
    ("host", "loopback"),
    [
        ("127.0.0.1", True),
        ("localhost", True),
        ("::1", True),
        ("0.0.0.0", False),
        ("10.1.2.3", False),
    ],
)
def test_serve_cautions_when_the_host_is_not_loopback(host: str, loopback: bool) -> None:
    from server.cli.serve import is_loopback, open_host_caution

    assert is_loopback(host) is loopback
    assert "add --token" in open_host_caution(host, None)
    assert "need the token" in open_host_caution(host, "t")
