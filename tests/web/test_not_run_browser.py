"""In the browser: a skipped detector's badge and event chip read "not run" (reason on
hover), and the ingest's plausibility warnings show above the charts."""

from __future__ import annotations

from collections.abc import Iterator
from typing import Any

import pytest

from analysis.archive.store import Archive
from tests.server.dashboard_fixtures import ingest_and_analyse, write_demo_inputs
from tests.web.live_server import LiveServer

pytestmark = pytest.mark.browser


@pytest.fixture(scope="module")
def skipped_run(tmp_path_factory: pytest.TempPathFactory) -> Iterator[tuple[LiveServer, str]]:
    from server.app import create_app

    folder = tmp_path_factory.mktemp("not-run")
    inputs = write_demo_inputs(folder / "in", duration_s=8.0)
    lines = inputs.map_path.read_text(encoding="utf-8").splitlines()
    # no lean reference (roll tracking cannot run) and the accelerometer z axis flipped
    lines = [ln for ln in lines if not ln.startswith("lean_cmd_deg")]
    lines = [
        ln.replace('unit = "g0" }', 'unit = "g0", scale = -1 }') if ln.startswith("acc_z_g") else ln
        for ln in lines
    ]
    inputs.map_path.write_text("\n".join(lines) + "\n", encoding="utf-8")
    root = folder / "archive"
    run_id = ingest_and_analyse(Archive(root), inputs, name="no lean reference")
    with LiveServer(create_app(root)) as server:
        yield server, run_id


def test_runs_table_badge_says_not_run(page: Any, skipped_run) -> None:
    live, run_id = skipped_run
    page.goto(f"{live.url}/")
    page.wait_for_selector("body[data-loaded='1']")
    badge = page.locator(f"tr[data-run-id='{run_id}'] .badge[data-kpi='roll_error_rms']")
    assert badge.locator(".badge-value").inner_text() == "not run"
    assert "roll_ref" in (badge.get_attribute("title") or "")
    other = page.locator(f"tr[data-run-id='{run_id}'] .badge[data-kpi='slip_events']")
    assert other.locator(".badge-value").inner_text() != "not run"
    assert page.page_errors == []


def test_run_page_chips_and_ingest_warnings(page: Any, skipped_run) -> None:
    live, run_id = skipped_run
    page.goto(f"{live.url}/run.html?id={run_id}")
    page.wait_for_selector("body[data-charts-ready='1']", timeout=60_000)
    badge = page.locator("#kpis .badge[data-kpi='roll_error_rms'] .badge-value")
    assert badge.inner_text() == "not run"
    chip = page.locator("#kpis .count-chip[data-kind='roll_error']")
    assert "not run" in chip.inner_text()
    assert "roll_ref" in (chip.get_attribute("title") or "")
    assert "0" not in chip.inner_text()
    warnings = page.locator("#ingest-warnings")
    assert warnings.is_visible()
    assert "accel_z" in warnings.inner_text() and "scale = -1" in warnings.inner_text()
    assert page.page_errors == []
