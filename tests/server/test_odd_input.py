"""Odd input answers 400 with the usual error shape, never 500 (issue 11, item 10)."""

from __future__ import annotations

import re
from collections.abc import Iterator
from pathlib import Path

import pytest
from fastapi.testclient import TestClient

from analysis.errors import ChannelMapError
from analysis.ingest.channel_map import parse_channel_map
from tests.analysis.ingest_kit import PROFILE, map_text
from tests.server.dashboard_fixtures import RunInputs, fresh_app, upload_form

DEEP_TOML = "a = " + "[" * 5000 + "]" * 5000 + "\n"


@pytest.fixture()
def api(tmp_path: Path) -> Iterator[TestClient]:
    with fresh_app(tmp_path / "archive") as c:
        yield c


def _error(response, status: int = 400) -> str:
    assert response.status_code == status, response.text
    body = response.json()
    assert set(body) == {"error"} and set(body["error"]) == {"type", "message"}
    message: str = body["error"]["message"]
    # never a server path (archive, upload folder, temp folder)
    assert not re.search(r"(?<![\w.])/(tmp|work|home|root|var|srv)/", message), message
    return message


def test_a_map_nested_5000_levels_deep_is_refused(api):
    assert "nested" in _error(api.put("/api/configs/map/deep", content=DEEP_TOML))
    assert "nested" in _error(api.put("/api/configs/profile/deep", content=DEEP_TOML))


def test_an_uploaded_map_nested_too_deep_is_refused_before_any_job(api, planted_inputs):
    parts, fields = upload_form(planted_inputs)
    parts = [p for p in parts if p[0] != "map_file"] + [("map_file", ("m.toml", DEEP_TOML))]
    assert "nested" in _error(api.post("/api/upload", files=parts, data=fields))
    assert api.get("/api/jobs").json()["jobs"] == []


@pytest.mark.parametrize("method", ["GET", "PATCH", "DELETE"])
def test_a_5000_character_run_id_is_refused(api, method):
    long_id = "a" * 5000
    kwargs = {"json": {"name": "x"}} if method == "PATCH" else {}
    response = api.request(method, f"/api/runs/{long_id}", **kwargs)
    message = _error(response, 404 if method == "GET" else response.status_code)
    assert response.status_code in (400, 404)
    assert "aaaa" in message and len(message) < 400


def test_upload_errors_show_file_names_not_server_paths(api, planted_inputs: RunInputs):
    parts, fields = upload_form(planted_inputs)
    parts = [p for p in parts if p[0] != "map_file"] + [("map_file", ("m.toml", "[[source]]\n"))]
    message = _error(api.post("/api/upload", files=parts, data=fields))
    assert "channel map" in message


@pytest.mark.parametrize("scale", ["nan", "inf", "-inf", "1e300", "1e-300"])
def test_map_checker_refuses_absurd_scales(scale):
    text = map_text().replace('unit = "deg" }', f'unit = "deg", scale = {scale} }}')
    with pytest.raises(ChannelMapError, match="scale"):
        parse_channel_map(text)


def test_ordinary_scales_pass():
    for scale in ("-1", "0.5", "1000"):
        text = map_text().replace('unit = "deg" }', f'unit = "deg", scale = {scale} }}')
        parse_channel_map(text)


def test_cli_deep_map_exits_2_with_a_message(tmp_path, capsys):
    from server.cli.main import main

    deep = tmp_path / "deep.toml"
    deep.write_text(DEEP_TOML)
    log = tmp_path / "a_state.csv"
    log.write_text("stamp_us,roll_deg,speed\n1,2,3\n")
    args = ["ingest", str(log), "--map", str(deep), "--profile", str(PROFILE)]
    assert main([*args, "--data", str(tmp_path / "d")]) == 2
    assert "nested" in capsys.readouterr().err


def test_scrub_paths_keeps_api_paths_and_units():
    from server.security import scrub_paths

    text = (
        "The channel map /tmp/u/run-1/config/map_file.toml is bad; DELETE /api/runs/x?confirm=x; "
        "unit m/s; /srv/data/archive/runs/r1/meta.json cannot be read"
    )
    assert scrub_paths(text, {"/srv/data/archive": "the archive"}) == (
        "The channel map map_file.toml is bad; DELETE /api/runs/x?confirm=x; "
        "unit m/s; the archive/runs/r1/meta.json cannot be read"
    )
