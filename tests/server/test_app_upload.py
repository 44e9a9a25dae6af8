"""Upload: a demo run through the API, and every bad input with its status and message."""

from __future__ import annotations

from collections.abc import Iterator
from pathlib import Path

import pytest
from fastapi.testclient import TestClient

from tests.server.dashboard_fixtures import RunInputs, fresh_app, upload_form, wait_job


@pytest.fixture()
def api(tmp_path: Path) -> Iterator[TestClient]:
    with fresh_app(tmp_path / "archive") as c:
        yield c


def _error(response) -> dict:
    body = response.json()
    assert {"type", "title", "status", "detail"} <= set(body), body
    return body


def test_upload_a_demo_run_then_find_and_open_it(api: TestClient, demo_inputs: RunInputs) -> None:
    parts, fields = upload_form(
        demo_inputs, name="uploaded demo", course="gullhaven-loop", tags="dry, morning"
    )
    response = api.post("/api/upload", files=parts, data=fields)
    assert response.status_code == 202, response.text
    job = response.json()["job"]
    assert job["state"] in ("queued", "running", "done")
    done = wait_job(api, job["id"])
    assert done["state"] == "done", done
    assert done["progress"] == 1.0
    run_id = done["run_id"]
    runs = api.get("/api/runs").json()["runs"]
    assert [r["run_id"] for r in runs] == [run_id]
    assert runs[0]["name"] == "uploaded demo"
    assert runs[0]["tags"] == ["dry", "morning"]
    assert runs[0]["analysed"] and runs[0]["kpis"] is not None
    body = api.get(f"/api/runs/{run_id}").json()
    assert body["analysis"]["events"]
    # The temporary upload folder is gone once the job ended.
    assert list(api.app.state.upload_root.iterdir()) == []  # type: ignore[attr-defined]

    # The same files again: nothing new is stored, the job points at the stored run.
    again = wait_job(api, api.post("/api/upload", files=parts, data=fields).json()["job"]["id"])
    assert again["state"] == "done"
    assert again["run_id"] == run_id
    assert "already stored" in again["message"]
    assert len(api.get("/api/runs").json()["runs"]) == 1
    # ... and a new name or tags brought with them are said not to be applied (item 6).
    renamed = dict(fields, name="other name", tags="wet")
    third = wait_job(api, api.post("/api/upload", files=parts, data=renamed).json()["job"]["id"])
    assert third["run_id"] == run_id
    assert "not applied" in third["message"]
    assert "name 'other name' (stored: 'uploaded demo')" in third["message"]
    assert api.get(f"/api/runs/{run_id}").json()["run"]["name"] == "uploaded demo"


def test_upload_with_stored_map_and_profile(
    api: TestClient, planted_inputs: RunInputs, tmp_path: Path
) -> None:
    for kind, path in (("map", planted_inputs.map_path), ("profile", planted_inputs.profile_path)):
        response = api.put(f"/api/configs/{kind}/bench-{kind}", content=path.read_bytes())
        assert response.status_code == 200, response.text
    assert api.get("/api/configs/map").json()["names"] == ["bench-map"]
    assert api.get("/api/configs/profile/bench-profile").text == (
        planted_inputs.profile_path.read_text()
    )
    parts = [("files", (p.name, p.read_bytes())) for p in planted_inputs.logs]
    data = {"map_name": "bench-map", "profile_name": "bench-profile"}
    job = wait_job(api, api.post("/api/upload", files=parts, data=data).json()["job"]["id"])
    assert job["state"] == "done", job
    # No name given: the run is named after its file plant_state.csv (the fixture's one
    # log), never "None" (issue 13, item 7).
    assert api.get(f"/api/runs/{job['run_id']}").json()["run"]["name"] == "plant_state"


def test_stored_profile_that_is_broken_is_refused(api: TestClient) -> None:
    response = api.put("/api/configs/profile/broken", content=b"[robot]\nname = 'x'\n")
    assert response.status_code == 400
    error = _error(response)
    assert error["type"] == "/api.html#problem-robot-profile"
    assert "wheel_radius_m" in error["detail"]
    assert api.get("/api/configs/profile").json()["names"] == []


def test_unknown_stored_map_name(api: TestClient, planted_inputs: RunInputs) -> None:
    parts = [("files", (p.name, p.read_bytes())) for p in planted_inputs.logs]
    parts.append(("profile_file", ("p.toml", planted_inputs.profile_path.read_bytes())))
    response = api.post("/api/upload", files=parts, data={"map_name": "nope"})
    assert response.status_code == 400
    assert "No stored channel map named 'nope'" in _error(response)["detail"]


@pytest.mark.parametrize("bad_name", ["../x.csv", "a/b.csv", "..\\x.csv", ".hidden.csv"])
def test_path_tricks_in_file_names_are_refused(
    api: TestClient, planted_inputs: RunInputs, bad_name: str
) -> None:
    parts, fields = upload_form(planted_inputs)
    parts[0] = ("files", (bad_name, b"stamp_s,roll\n1,0\n"))
    response = api.post("/api/upload", files=parts, data=fields)
    assert response.status_code == 400
    error = _error(response)
    assert repr(bad_name) in error["detail"]
    assert "is not allowed" in error["detail"]
    # Nothing was written outside (or inside) the upload folder, and no run appeared.
    assert list(api.app.state.upload_root.iterdir()) == []  # type: ignore[attr-defined]
    assert api.get("/api/runs").json()["runs"] == []


def test_map_that_does_not_fit_the_files_fails_the_job_with_the_columns(
    api: TestClient, planted_inputs: RunInputs
) -> None:
    parts, fields = upload_form(planted_inputs)
    wrong = planted_inputs.map_path.read_text().replace('"roll" = {', '"imu_roll_deg" = {')
    parts = [p for p in parts if p[0] != "map_file"]
    parts.append(("map_file", ("wrong-map.toml", wrong.encode())))
    job = wait_job(api, api.post("/api/upload", files=parts, data=fields).json()["job"]["id"])
    assert job["state"] == "failed"
    assert job["error"]["type"] == "/api.html#problem-channel-map"
    assert "imu_roll_deg" in job["error"]["detail"]
    assert api.get("/api/runs").json()["runs"] == []


def test_map_with_a_wrong_unit_is_refused_before_any_job(
    api: TestClient, planted_inputs: RunInputs
) -> None:
    parts, fields = upload_form(planted_inputs)
    wrong = planted_inputs.map_path.read_text().replace(
        '"roll" = { signal = "roll", unit = "rad" }', '"roll" = { signal = "roll", unit = "N*m" }'
    )
    parts = [p for p in parts if p[0] != "map_file"] + [("map_file", ("m.toml", wrong.encode()))]
    response = api.post("/api/upload", files=parts, data=fields)
    assert response.status_code == 400
    error = _error(response)
    assert error["type"] == "/api.html#problem-channel-map"
    assert "roll" in error["detail"]
    assert api.get("/api/jobs").json()["jobs"] == []


def test_garbage_log_file_fails_the_job_with_the_ingest_message(
    api: TestClient, planted_inputs: RunInputs
) -> None:
    parts, fields = upload_form(planted_inputs)
    parts[0] = ("files", ("junk_state.csv", bytes(range(256)) * 40))
    job = wait_job(api, api.post("/api/upload", files=parts, data=fields).json()["job"]["id"])
    assert job["state"] == "failed"
    assert job["error"]["type"] in ("/api.html#problem-log-file", "/api.html#problem-channel-map")
    assert "junk_state.csv" in job["error"]["detail"]
    assert api.get("/api/runs").json()["runs"] == []


def test_upload_larger_than_the_limit_is_413(tmp_path: Path, planted_inputs: RunInputs) -> None:
    with fresh_app(tmp_path / "archive", max_upload_mb=1) as c:
        parts, fields = upload_form(planted_inputs)
        parts[0] = ("files", ("big_state.csv", b"0" * (1024 * 1024 + 10)))
        response = c.post("/api/upload", files=parts, data=fields)
        assert response.status_code == 413
        error = _error(response)
        assert "larger than this server's limit of 1 MiB" in error["detail"]
        assert "--max-upload-mb" in error["detail"]
        assert list(c.app.state.upload_root.iterdir()) == []  # type: ignore[attr-defined]


def test_streamed_upload_without_length_is_cut_at_the_limit(tmp_path: Path) -> None:
    boundary = "outrigger-test-boundary"
    head = (
        f"--{boundary}\r\n"
        'Content-Disposition: form-data; name="files"; filename="big_state.csv"\r\n'
        "Content-Type: text/csv\r\n\r\n"
    ).encode()

    def body():  # chunked transfer: the server cannot know the size in advance
        yield head
        for _ in range(40):
            yield b"1" * 65536

    with fresh_app(tmp_path / "archive", max_upload_mb=1) as c:
        response = c.post(
            "/api/upload",
            content=body(),
            headers={"Content-Type": f"multipart/form-data; boundary={boundary}"},
        )
        assert response.status_code == 413
        assert "limit of 1 MiB" in _error(response)["detail"]


@pytest.mark.parametrize(
    ("drop", "message"),
    [
        ("files", "No log files in the upload"),
        ("map_file", "No channel map given"),
        ("profile_file", "No robot profile given"),
    ],
)
def test_missing_parts(api: TestClient, planted_inputs: RunInputs, drop: str, message: str) -> None:
    parts, fields = upload_form(planted_inputs)
    parts = [p for p in parts if p[0] != drop]
    response = api.post("/api/upload", files=parts, data=fields)
    assert response.status_code == 400
    assert message in _error(response)["detail"]


def test_upload_must_be_multipart(api: TestClient) -> None:
    response = api.post("/api/upload", json={"files": []})
    assert response.status_code == 400
    assert "multipart/form-data" in _error(response)["detail"]


def test_unknown_job_is_404(api: TestClient) -> None:
    response = api.get("/api/jobs/0123456789ab")
    assert response.status_code == 404
    assert "No job '0123456789ab'" in _error(response)["detail"]
