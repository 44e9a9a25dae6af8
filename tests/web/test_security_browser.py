"""The pages under their Content-Security-Policy, and a cross-site form, in Chromium.

Issue 11, items 4 and 9: every page still works with inline scripts limited to the
hashed ones (no CSP violation is reported), and a form on another web site that
posts to the dashboard stores nothing.
"""

from __future__ import annotations

from typing import Any

import pytest

from tests.server.dashboard_fixtures import RunInputs
from tests.web.live_server import LiveServer
from tests.web.test_browser import _upload_through_the_page

pytestmark = pytest.mark.browser


def _csp_reports(page: Any) -> list[str]:
    seen: list[str] = []
    page.on(
        "console",
        lambda m: seen.append(m.text) if "Content Security Policy" in m.text else None,
    )
    return seen


def test_pages_run_under_the_policy_without_violations(
    page: Any, live: LiveServer, web_demo_inputs: RunInputs
) -> None:
    violations = _csp_reports(page)
    run_id = _upload_through_the_page(page, live, web_demo_inputs, "CSP upload")
    page.goto(f"{live.url}/run.html?id={run_id}")
    page.wait_for_selector("body[data-charts-ready='1']", timeout=60_000)
    page.goto(f"{live.url}/compare.html?a={run_id}")
    page.wait_for_load_state("networkidle")
    page.goto(f"{live.url}/")
    page.wait_for_selector(f"tr[data-run-id='{run_id}']", timeout=30_000)
    page.goto(f"{live.url}/api.html")
    page.wait_for_load_state("networkidle")
    assert violations == []
    assert page.page_errors == []


def test_an_unhashed_inline_script_is_blocked_and_reported(page: Any, live: LiveServer) -> None:
    # The control for the test above: the listener does see a violation.
    violations = _csp_reports(page)
    page.route(
        f"{live.url}/probe.html",
        lambda r: r.fulfill(
            status=200,
            headers={"content-type": "text/html", "content-security-policy": "script-src 'self'"},
            body="<script>window.ran = 1</script>",
        ),
    )
    page.goto(f"{live.url}/probe.html")
    assert page.evaluate("() => window.ran") is None
    assert violations


def test_a_form_on_another_site_cannot_store_a_run(page: Any, live: LiveServer) -> None:
    before = page.request.get(f"{live.url}/api/runs").json()["runs"]
    evil = "http://evil.example/"
    form = (
        f"<form id='f' method='post' enctype='multipart/form-data' action='{live.url}/api/upload'>"
        "<input name='name' value='planted'></form><script>f.submit()</script>"
    )
    page.route(evil, lambda r: r.fulfill(status=200, content_type="text/html", body=form))
    with page.expect_response(f"{live.url}/api/upload") as answer:
        page.goto(evil)
    assert answer.value.status == 403
    assert page.request.get(f"{live.url}/api/runs").json()["runs"] == before
