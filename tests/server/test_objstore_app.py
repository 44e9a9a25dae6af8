"""The command line and the dashboard on an object-store archive (``s3://``).

A real S3 server on loopback (moto in server mode, ``tests/s3_server.py``); the
expected values come from the same commands on a local folder archive given the
same files, whose own tests check what they mean.
"""

from __future__ import annotations

import io
import json
import zipfile
from collections.abc import Iterator
from pathlib import Path

import pandas as pd
import pytest
from fastapi.testclient import TestClient

from analysis.archive.objstore import ObjectArchive
from server.app import create_app
from server.cli.main import main
from tests.server.dashboard_fixtures import RunInputs, upload_form, wait_job, write_planted_inputs


@pytest.fixture(scope="module")
def two_inputs(tmp_path_factory: pytest.TempPathFactory) -> list[RunInputs]:
    """The planted run, and the same run an hour later (other bytes, so another run)."""
    first = write_planted_inputs(tmp_path_factory.mktemp("s3-cli-a"))
    folder = tmp_path_factory.mktemp("s3-cli-b")
    frame = pd.read_csv(first.logs[0])
    frame["stamp_s"] += 3600.0
    frame.to_csv(folder / "plant_state.csv", index=False)
    return [first, RunInputs([folder / "plant_state.csv"], first.map_path, first.profile_path)]


def _ingest_args(inputs: RunInputs, root: str, controller: str) -> list[str]:
    return [
        "ingest", *map(str, inputs.logs), "--map", str(inputs.map_path),
        "--profile", str(inputs.profile_path), "--course", "test-bench",
        "--controller", controller, "--quiet", "--data", root,
    ]  # fmt: skip


def _run(capsys: pytest.CaptureFixture[str], *args: str) -> tuple[int, str]:
    code = main(list(args))
    out = capsys.readouterr()
    return code, out.out + out.err


def test_every_command_on_s3_matches_the_local_archive(
    s3_root: str,
    two_inputs: list[RunInputs],
    tmp_path: Path,
    capsys: pytest.CaptureFixture[str],
    monkeypatch: pytest.MonkeyPatch,
) -> None:
    local = str(tmp_path / "local")
    ids: dict[str, list[str]] = {}
    for root in (local, s3_root):
        for inputs, controller in zip(two_inputs, ("ctl-a", "ctl-b"), strict=True):
            code, out = _run(capsys, *_ingest_args(inputs, root, controller))
            assert code == 0, out
            ids.setdefault(root, []).append(out.strip().splitlines()[-1])
    a, b = ids[s3_root]

    code, out = _run(capsys, "runs", "--json", "--data", s3_root)
    listed = json.loads(out)
    assert code == 0 and [r["run_id"] for r in listed] == [a, b]
    assert all(r["analysed"] for r in listed)
    # OUTRIGGER_DATA may name the store as well
    monkeypatch.setenv("OUTRIGGER_DATA", s3_root)
    code, out = _run(capsys, "runs", "--json")
    assert code == 0 and [r["run_id"] for r in json.loads(out)] == [a, b]
    code, out = _run(capsys, "show", a, "--json", "--data", s3_root)
    assert code == 0 and json.loads(out)["run_id"] == a

    # analyse: the same result as on the local archive
    code, out = _run(capsys, "analyse", a, "--json", "--data", s3_root)
    there = json.loads(out)
    code_l, out_l = _run(capsys, "analyse", ids[local][0], "--json", "--data", local)
    here = json.loads(out_l)
    assert code == code_l == 0
    assert there["kpis"] == here["kpis"] and there["events"] == here["events"]

    limits = tmp_path / "limits.toml"
    limits.write_text("[limits]\nfalls_max = 0\ntip_margin_min = -1.0\n")
    code, out = _run(capsys, "check", a, "--limits", str(limits), "--data", s3_root)
    assert code == 0, out

    code, out = _run(capsys, "fleet", "kpis", "--csv", "--data", s3_root)
    fleet = pd.read_csv(io.StringIO(out))
    assert code == 0 and sorted(fleet["run_id"].unique()) == sorted([a, b])

    code, out = _run(capsys, "compare", a, b, "--json", "--n-boot", "200", "--data", s3_root)
    code_l, out_l = _run(
        capsys, "compare", *ids[local], "--json", "--n-boot", "200", "--data", local
    )
    assert code == code_l == 0, out
    there, here = json.loads(out), json.loads(out_l)
    assert there["kpis"] and there["kpis"] == here["kpis"]

    code, out = _run(capsys, "course-marks", "test-bench", "5,10", "--data", s3_root)
    assert code == 0 and s3_root in out
    code, out = _run(capsys, "course-marks", "test-bench", "--data", s3_root)
    assert "5 m, 10 m" in out

    code, out = _run(capsys, "analyse-all", "--data", s3_root)
    assert code == 0 and out.count("events") == 2, out

    code, out = _run(capsys, "show", "no-such-run", "--data", s3_root)
    assert code == 2 and "No run 'no-such-run'" in out


@pytest.fixture
def api(s3_root: str) -> Iterator[TestClient]:
    with TestClient(create_app(s3_root), raise_server_exceptions=False) as c:
        yield c


def test_the_dashboard_on_s3_uploads_shows_edits_and_deletes(
    api: TestClient, s3_root: str, two_inputs: list[RunInputs]
) -> None:
    parts, fields = upload_form(two_inputs[0], name="planted on s3", course="test-bench")
    job = wait_job(api, api.post("/api/upload", files=parts, data=fields).json()["job"]["id"])
    assert job["state"] == "done", job
    run_id = job["run_id"]
    runs = api.get("/api/runs").json()["runs"]
    assert [r["run_id"] for r in runs] == [run_id] and runs[0]["analysed"]
    body = api.get(f"/api/runs/{run_id}").json()
    assert body["analysis"]["events"]

    charts = api.get(f"/api/runs/{run_id}/charts")
    assert charts.status_code == 200, charts.text
    series = api.get(f"/api/runs/{run_id}/series", params={"signals": "roll"})
    assert series.status_code == 200, series.text
    window = api.get(f"/api/runs/{run_id}/series", params={"signals": "roll", "t0": 1, "t1": 2})
    assert window.status_code == 200, window.text
    assert api.get(f"/api/runs/{run_id}/events.csv").status_code == 200

    # the stored files, straight from the store
    zipped = zipfile.ZipFile(io.BytesIO(api.get(f"/api/runs/{run_id}/files.zip").content))
    names = set(zipped.namelist())
    assert f"{run_id}/meta.json" in names and f"{run_id}/streams/state.parquet" in names
    assert json.loads(zipped.read(f"{run_id}/meta.json"))["run_id"] == run_id

    # re-analysis with other thresholds, as a job
    response = api.post(f"/api/runs/{run_id}/analyse", json={"roll_band_deg": 2.0})
    assert response.status_code == 202, response.text
    assert wait_job(api, response.json()["job"]["id"])["state"] == "done"

    edit = api.patch(f"/api/runs/{run_id}", json={"name": "renamed", "tags": ["s3"]})
    assert edit.status_code == 200, edit.text
    assert ObjectArchive(s3_root).get_meta(run_id)["name"] == "renamed"

    # a second run, then a comparison of the two
    parts, fields = upload_form(two_inputs[1], course="test-bench")
    other = wait_job(api, api.post("/api/upload", files=parts, data=fields).json()["job"]["id"])
    assert other["state"] == "done", other
    compared = api.get("/api/compare", params={"a": run_id, "b": other["run_id"], "n_boot": 200})
    assert compared.status_code == 200, compared.text

    # stored configs live in the store too
    assert (
        api.put("/api/configs/map/bench", content=two_inputs[0].map_path.read_bytes()).status_code
        == 200
    )
    assert api.get("/api/configs/map").json()["names"] == ["bench"]
    assert api.get("/api/configs/map/bench").text == two_inputs[0].map_path.read_text()

    gone = api.delete(f"/api/runs/{run_id}", params={"confirm": run_id})
    assert gone.status_code in (200, 204), gone.text
    assert [r["run_id"] for r in api.get("/api/runs").json()["runs"]] == [other["run_id"]]
    assert api.get(f"/api/runs/{run_id}").status_code == 404


def test_a_missing_bucket_exits_2_with_what_to_do(
    s3_endpoint: str, capsys: pytest.CaptureFixture[str]
) -> None:
    code, out = _run(capsys, "runs", "--data", "s3://no-such-bucket-q7/archive")
    assert code == 2
    assert "bucket 'no-such-bucket-q7'" in out and "Create it first" in out


def test_a_bad_upload_stores_nothing_in_the_store(
    api: TestClient, s3_root: str, two_inputs: list[RunInputs]
) -> None:
    parts, fields = upload_form(two_inputs[0])
    # A right header, then one row in ten garbled: refused after the rows were streamed.
    lines = two_inputs[0].logs[0].read_bytes().splitlines()
    bad = [b"x,y" if i % 10 == 5 else line for i, line in enumerate(lines)]
    parts[0] = ("files", ("plant_state.csv", b"\n".join(bad) + b"\n"))
    response = api.post("/api/upload", files=parts, data=fields)
    assert response.status_code == 202, response.text
    job = wait_job(api, response.json()["job"]["id"])
    assert job["state"] == "failed", job
    assert job["error"]["type"] == "/api.html#problem-log-file"
    assert "plant_state.csv" in job["error"]["detail"]
    assert api.get("/api/runs").json()["runs"] == []
    assert list((ObjectArchive(s3_root).loc / "runs").walk()) == []
