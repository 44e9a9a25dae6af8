"""The Run page of a multi-lap run in headless Chromium: the lap strip and the laps card.

Covers only what the browser does: one button per lap above the timelines, a click
zooming every chart to that lap, and the per-lap charts and drift verdicts shown.
"""

from __future__ import annotations

import json
import urllib.request
from collections.abc import Iterator
from typing import Any

import pytest

from analysis.archive.store import Archive
from tests.server.lap_archive import store_lap_run
from tests.web.live_server import LiveServer

pytestmark = pytest.mark.browser

RANGES_JS = "() => [...document.querySelectorAll('.chart')].map(d => d.stripChart.range)"


@pytest.fixture(scope="module")
def lap_live(tmp_path_factory: pytest.TempPathFactory) -> Iterator[tuple[LiveServer, str, str]]:
    from server.app import create_app

    root = tmp_path_factory.mktemp("lap-web")
    archive = Archive(root / "archive")
    run_id = store_lap_run(archive, root / "in", "lean-ctl 2.0", 52, 0.015)
    base_id = store_lap_run(archive, root / "in-a", "lean-ctl 1.4", 51, 0.0)
    with LiveServer(create_app(root / "archive")) as server:
        yield server, run_id, base_id


def test_lap_strip_zooms_to_a_lap_and_the_card_shows_drift(page: Any, lap_live) -> None:
    live, run_id, _ = lap_live
    with urllib.request.urlopen(f"{live.url}/api/runs/{run_id}") as resp:
        laps = json.load(resp)["laps_shown"]["laps"]
    page.goto(f"{live.url}/run.html?id={run_id}")
    page.wait_for_selector("body[data-charts-ready='1']", timeout=60_000)
    strip = page.locator("#lap-strip")
    assert strip.is_visible()
    assert page.locator("#lap-strip button.lap").count() == len(laps) == 8
    # The strip sits above the timelines
    assert strip.bounding_box()["y"] < page.locator("#charts").bounding_box()["y"]
    third = laps[2]
    page.click("#lap-strip button[data-lap='3']")
    page.wait_for_function(
        """([s, e]) => [...document.querySelectorAll('.chart')].every(d => {
            const r = d.stripChart.range;
            return r && Math.abs(r[0] - s) < 0.5 && Math.abs(r[1] - e) < 0.5;
        })""",
        arg=[third["start_s"], third["end_s"]],
        timeout=15_000,
    )
    ranges = page.evaluate(RANGES_JS)
    assert all(
        abs(r[0] - third["start_s"]) < 0.5 and abs(r[1] - third["end_s"]) < 0.5 for r in ranges
    )
    card = page.locator("#lap-card")
    assert card.is_visible()
    # Truth: the generator slows this run's target speeds 1.5 % a lap
    assert (
        page.locator("#lap-card tr[data-kpi='lap_time']").get_attribute("data-verdict") == "worse"
    )
    assert page.locator("#lap-card tr[data-kpi='lap_time'] svg circle").count() == 8
    assert "deg" in card.inner_text()  # roll error shown in degrees
    assert not page.page_errors


def test_compare_page_shows_the_lap_by_lap_table(page: Any, lap_live) -> None:
    live, run_id, base_id = lap_live
    page.goto(f"{live.url}/compare.html?a={base_id}&b={run_id}&n_boot=200")
    page.wait_for_selector("body[data-loaded='1']", timeout=120_000)
    assert page.locator("#laps-card").is_visible()
    assert page.locator("#laps-table tbody tr").count() == 8
    assert "[deg]" in (page.locator("#laps-table thead").text_content() or "")
    # Truth: the generator slows the candidate's target speeds 1.5 % a lap
    assert "Lap time: worse" in page.locator("#laps-drift").inner_text()
    assert not page.page_errors
