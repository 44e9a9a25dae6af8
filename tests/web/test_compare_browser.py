"""The comparison in headless Chromium: the HTML report offline, and the compare page.

Covers only what the browser does: the report draws its charts with no network at
all (every request but file:// is blocked), and the compare page draws the KPI
table, overlay charts with both versions, the refusal, the same-course choices,
and shows user text as text.
"""

from __future__ import annotations

from collections.abc import Iterator
from pathlib import Path
from typing import Any

import pytest

from analysis.archive.store import Archive
from analysis.compare.compare import compare_archived
from analysis.compare.view import overlay
from server.report import build_report
from tests.server.compare_archive import CompareArchive, stock
from tests.web.live_server import LiveServer

pytestmark = pytest.mark.browser

N_BOOT = 300


@pytest.fixture(scope="module")
def compare_store(tmp_path_factory: pytest.TempPathFactory) -> CompareArchive:
    return stock(tmp_path_factory.mktemp("compare-web"))


@pytest.fixture(scope="module")
def compare_live(compare_store: CompareArchive) -> Iterator[LiveServer]:
    from server.app import create_app

    with LiveServer(create_app(compare_store.root)) as server:
        yield server


def _offline(page: Any, allowed_prefix: str) -> list[str]:
    """Abort every request not starting with ``allowed_prefix``; return the aborted URLs."""
    blocked: list[str] = []

    def route(r: Any) -> None:
        if r.request.url.startswith(allowed_prefix):
            r.continue_()
        else:
            blocked.append(r.request.url)
            r.abort()

    page.context.route("**/*", route)
    return blocked


def test_report_opens_without_network_and_draws_its_charts(
    page: Any, compare_store: CompareArchive, tmp_path: Path
) -> None:
    s = compare_store
    comp, runs_a, runs_b = compare_archived(Archive(s.root), [s.a], [s.b], n_boot=N_BOOT)
    view = overlay(comp, runs_a, runs_b)
    path = tmp_path / "report.html"
    path.write_text(build_report(comp, view), encoding="utf-8")
    blocked = _offline(page, "file://")
    page.goto(path.as_uri())
    n = len(view["signals"])
    assert n >= 4
    page.wait_for_function(
        f"() => document.querySelectorAll('.js-plotly-plot .main-svg').length >= {n}",
        timeout=30_000,
    )
    lines = page.eval_on_selector_all(
        ".js-plotly-plot",
        "ds => ds.map(d => d.querySelectorAll('.scatterlayer .trace path.js-line').length)",
    )
    assert lines == [2] * n  # A and B in every chart
    assert page.locator(".shapelayer path").count() > 0  # segment lines and events
    # One overall KPI table and one per segment.
    assert page.locator("table.kpis tr[data-kpi='roll_error_rms']").count() == 1 + len(
        comp.segments
    )
    assert blocked == []
    assert page.page_errors == []


def test_compare_page_draws_table_and_overlays(
    page: Any, compare_live: LiveServer, compare_store
) -> None:
    s = compare_store
    blocked = _offline(page, compare_live.url)
    page.goto(f"{compare_live.url}/compare.html?a={s.a}&b={s.b}&n_boot={N_BOOT}")
    page.wait_for_selector("body[data-loaded='1']", timeout=60_000)
    assert page.locator("#error").is_hidden()
    assert page.locator("#refusal").is_hidden()
    assert page.locator("#kpi-table tbody tr").count() >= 10
    verdicts = set(
        page.eval_on_selector_all("#kpi-table td.verdict", "ts => ts.map(t => t.dataset.verdict)")
    )
    assert verdicts <= {"better", "worse", "no clear difference", "no verdict"}
    # Peak slip speed is an indicative extreme: shown, never judged.
    slip = page.locator("#kpi-table tr[data-kpi='wheel_l.peak_slip_speed'] td.verdict")
    assert slip.inner_text() == "no verdict (indicative)"
    assert page.inner_text("#basis").startswith("Verdicts rest on: 1 run per version")
    traces = page.eval_on_selector_all("#charts .chart", "ds => ds.map(d => d.data.length)")
    assert len(traces) >= 4 and all(n == 2 for n in traces)
    colours = page.eval_on_selector("#charts .chart", "d => d.data.map(t => t.line.color)")
    assert colours == ["#000000", "#8C8C8C"]  # RUN_COLOURS, not an event colour
    assert page.locator("#segment-select option").count() >= 2
    assert page.locator("#segment-table tbody tr").count() >= 10
    # The run name "loop <b>old</b>" is text, not markup.
    assert "loop <b>old</b>" in page.inner_text("#runs")
    assert page.locator("#runs b").count() == 0
    assert page.get_attribute("#report-link", "href").startswith("/api/compare/report?")
    assert blocked == []
    assert page.page_errors == []


def test_compare_page_states_the_refusal(
    page: Any, compare_live: LiveServer, compare_store
) -> None:
    s = compare_store
    page.goto(f"{compare_live.url}/compare.html?a={s.a}&b={s.hill}&n_boot={N_BOOT}")
    page.wait_for_selector("body[data-loaded='1']", timeout=60_000)
    assert page.locator("#refusal").is_visible()
    assert "Per-segment comparison is refused" in page.inner_text("#refusal")
    assert page.locator("#segments-card").is_hidden()
    assert page.locator("#kpi-table tbody tr").count() >= 10


def test_runs_table_leads_to_the_picker_with_same_course_first(
    page: Any, compare_live: LiveServer, compare_store
) -> None:
    s = compare_store
    page.goto(compare_live.url + "/")
    link = page.wait_for_selector(f"tr[data-run-id='{s.a}'] a.compare-link", timeout=30_000)
    link.click()
    page.wait_for_selector("body[data-loaded='1']", timeout=30_000)
    page.wait_for_function("() => document.querySelector('select[name=b] optgroup') !== null")
    groups = page.eval_on_selector_all(
        "select[name=b] optgroup",
        "gs => gs.map(g => [g.label, [...g.querySelectorAll('option')].map(o => o.value)])",
    )
    assert groups[0] == ["Same course", [s.b]]
    assert s.hill in groups[1][1]
    page.select_option("select[name=b]", s.b)
    page.click("#picker button[type=submit]")
    page.wait_for_selector("#kpi-table tbody tr", timeout=60_000)
    assert page.locator("#result").is_visible()
