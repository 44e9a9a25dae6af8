"""API errors are RFC 9457 problem details, each type documented on the API page."""

from __future__ import annotations

from pathlib import Path

from fastapi.testclient import TestClient

from server.app import create_app
from server.problems import PROBLEMS, TYPE_BASE, problem

WEB = Path(__file__).resolve().parents[2] / "web"


def test_every_problem_type_is_documented_on_the_api_page() -> None:
    page = (WEB / "api.html").read_text(encoding="utf-8")
    for slug, title in PROBLEMS.values():
        # RFC 9457 section 3.1.1: the type URI should lead to documentation for people.
        assert f'id="problem-{slug}"' in page, slug
        assert title in page, title


def test_problem_members() -> None:
    body = problem("RunNotFoundError", 404, "No run 'x'.", "/api/runs/x")
    # RFC 9457 section 3.1: type, title, status, detail, instance.
    assert body == {
        "type": TYPE_BASE + "run-not-found",
        "title": "No such run",
        "status": 404,
        "detail": "No run 'x'.",
        "instance": "/api/runs/x",
    }
    # An unknown kind gets the standard 'about:blank' type and the HTTP reason phrase
    # as its title (RFC 9457 section 4.2.1).
    other = problem("SomethingElse", 409, "x")
    assert other["type"] == "about:blank" and other["title"] == "Conflict"


def test_the_server_answers_problem_json(tmp_path: Path) -> None:
    with TestClient(create_app(tmp_path / "archive"), raise_server_exceptions=False) as client:
        missing = client.get("/api/runs/no-such-run")
        assert missing.status_code == 404
        assert missing.headers["content-type"] == "application/problem+json"
        body = missing.json()
        assert body["type"] == TYPE_BASE + "run-not-found"
        assert body["title"] == "No such run" and body["status"] == 404
        assert "no-such-run" in body["detail"]
        assert "Error" not in body["title"]  # no internal class name for people
        assert str(tmp_path) not in body["detail"]  # no server path in the browser
        bad = client.get("/api/runs", params={"date_from": "yesterday"})
        nowhere = client.get("/api/nothing-here")
        assert nowhere.status_code == 404 and nowhere.json()["type"] == TYPE_BASE + "not-found"
        for response in (bad, nowhere):
            if response.status_code >= 400:
                assert response.headers["content-type"] == "application/problem+json"
