"""Cross-site writes, host names, security headers, upload temp folders (issue 11, 4/7/9).

Header values follow the OWASP HTTP Headers Cheat Sheet (common practice): CSP with
``default-src 'self'`` and no inline script but hashed ones, ``nosniff``,
``X-Frame-Options: DENY`` with ``frame-ancestors 'none'``, ``Referrer-Policy: no-referrer``.
"""

from __future__ import annotations

import base64
import hashlib
import os
import re
from collections.abc import Iterator
from pathlib import Path

import pytest
from fastapi.testclient import TestClient

from analysis.archive.store import Archive
from analysis.resources import web_folder
from server.cli.main import build_parser
from server.cli.serve import build_app
from server.security import script_hashes, served_hosts
from tests.server.dashboard_fixtures import RunInputs, fresh_app, upload_form, wait_job

EVIL = "http://evil.example"


@pytest.fixture()
def api(tmp_path: Path) -> Iterator[TestClient]:
    with fresh_app(tmp_path / "archive") as c:
        yield c


def test_cross_site_form_post_is_refused_and_stores_nothing(api, planted_inputs: RunInputs):
    # Issue 11, item 4: with no token, a form on another site stored a run.
    parts, fields = upload_form(planted_inputs)
    response = api.post("/api/upload", files=parts, data=fields, headers={"Origin": EVIL})
    assert response.status_code == 403
    error = response.json()
    assert response.headers["content-type"] == "application/problem+json"
    assert error["type"] == "/api.html#problem-other-site" and "evil.example" in error["detail"]
    assert api.get("/api/jobs").json()["jobs"] == []
    assert api.get("/api/runs").json()["runs"] == []
    for method in ("put", "patch", "delete"):
        r = api.request(method.upper(), "/api/runs/x", headers={"Origin": "null"})
        assert r.status_code == 403, method


def test_same_origin_and_script_writes_pass(api, planted_inputs: RunInputs):
    parts, fields = upload_form(planted_inputs)
    own = api.post("/api/upload", files=parts, data=fields, headers={"Origin": "http://testserver"})
    assert own.status_code == 202
    assert wait_job(api, own.json()["job"]["id"])["state"] == "done"
    # a script (curl) sends no Origin
    again = api.post("/api/upload", files=parts, data=fields)
    assert again.status_code == 202
    # reads are never refused for their Origin
    assert api.get("/api/runs", headers={"Origin": EVIL}).status_code == 200


def _served(tmp_path: Path, *argv: str) -> TestClient:
    args = build_parser().parse_args(["serve", "--data", str(tmp_path / "archive"), *argv])
    return TestClient(build_app(args), base_url="http://127.0.0.1:8321")


def test_serve_answers_only_the_host_names_it_serves(tmp_path):
    # Issue 11, item 4: a DNS-rebinding page reaches the server under a foreign name.
    with _served(tmp_path) as c:
        assert c.get("/api/runs").status_code == 200
        for host in ("localhost:8321", "[::1]:8321", "127.0.0.1"):
            assert c.get("/api/runs", headers={"Host": host}).status_code == 200, host
        refused = c.get("/api/runs", headers={"Host": "rebind.evil.example:8321"})
        assert refused.status_code == 400
        msg = refused.json()["detail"]
        assert "rebind.evil.example" in msg and "--allow-host" in msg
        assert c.get("/", headers={"Host": "rebind.evil.example"}).status_code == 400
    with _served(tmp_path, "--allow-host", "robot-lab.local", "--host", "10.1.2.3") as c:
        for host in ("robot-lab.local:8321", "10.1.2.3:8321", "localhost"):
            assert c.get("/api/runs", headers={"Host": host}).status_code == 200, host
        assert c.get("/api/runs", headers={"Host": "other.local"}).status_code == 400


def test_served_hosts_of_a_wildcard_listen_address():
    assert served_hosts("0.0.0.0", ["Lab-PC"]) == {"127.0.0.1", "localhost", "::1", "lab-pc"}


HEADERS = {
    "x-content-type-options": "nosniff",
    "x-frame-options": "DENY",
    "referrer-policy": "no-referrer",
}


def _check_headers(response) -> str:
    for key, value in HEADERS.items():
        assert response.headers.get(key) == value, (response.url, key)
    csp = response.headers["content-security-policy"]
    assert "default-src 'self'" in csp and "frame-ancestors 'none'" in csp
    script_src = re.search(r"script-src ([^;]*)", csp).group(1)
    assert "'unsafe-inline'" not in script_src and "'unsafe-eval'" not in script_src
    return csp


@pytest.mark.parametrize(
    "path",
    ["/", "/index.html", "/run.html", "/css/style.css", "/api/runs", "/api/meta",
     "/api/runs/nope", "/nothing-here", "/vendor/plotly.min.js", "/api/jobs"],
)  # fmt: skip
def test_every_answer_carries_the_security_headers(api, path):
    _check_headers(api.get(path))


def test_an_error_answer_and_a_refusal_carry_them_too(api):
    _check_headers(api.post("/api/upload", headers={"Origin": EVIL}))
    _check_headers(api.post("/api/upload", content=b"x", headers={"Content-Type": "text/plain"}))


def test_the_run_page_inline_script_is_allowed_by_its_hash(api):
    # CSP Level 3 hash-source: base64 of SHA-256 over the script text (W3C CSP3).
    page = (web_folder() / "run.html").read_text(encoding="utf-8")
    body = re.search(r"<script>(.*?)</script>", page, re.DOTALL).group(1)
    expected = "'sha256-" + base64.b64encode(hashlib.sha256(body.encode()).digest()).decode() + "'"
    assert script_hashes(page) == [expected]
    assert expected in _check_headers(api.get("/run.html"))


def test_upload_temp_folders_live_under_the_archive_staging_and_are_cleaned(tmp_path):
    # Issue 11, item 7: a crashed server left its upload folders in /tmp.
    root = tmp_path / "archive"
    with fresh_app(root) as c:
        upload_root = c.app.state.upload_root  # type: ignore[attr-defined]
        assert upload_root.parent == root / "staging"
        assert upload_root.name.startswith(f"{os.getpid()}-upload-")
    # What a killed server leaves behind: a folder named after a process that is gone.
    leftover = root / "staging" / "999999999-upload-abc" / "run-1" / "logs"
    leftover.mkdir(parents=True)
    (leftover / "x_state.csv").write_bytes(b"0" * 1000)
    Archive(root)
    assert not (root / "staging" / "999999999-upload-abc").exists()
