"""The offline API reference page lists the OpenAPI endpoints without any network."""

from __future__ import annotations

import pytest

pytestmark = pytest.mark.browser


def test_api_page_lists_endpoints_offline(live, page):
    # Only the server itself may answer: any other request would need the internet.
    page.route("**/*", lambda r: r.continue_() if r.request.url.startswith(live.url) else r.abort())
    page.goto(f"{live.url}/api.html")
    page.wait_for_selector(".api-table tbody tr")
    paths = page.locator(".api-path").all_text_contents()
    assert "/api/runs" in paths and "/api/runs/{run_id}/series" in paths
    assert page.page_errors == []
