"""Every page and the report read in one unit convention (issue 13, item 1).

Walks the runs table, a Run page, the Compare page and the HTML report in
headless Chromium and reads the unit labels people see: angles in deg, angular
rates in deg/s, shares of time in %; never rad, never a bare fraction for a
share, never a bibliography note such as "from memory" (item 5), never more than
3 significant digits in a KPI table (item 4).
"""

from __future__ import annotations

import re
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
#: Words a page must never show: a radian unit, bibliography notes.
RAD = re.compile(r"\brad\b|rad/s|rad\*s|\[rad")
NOTES = re.compile(r"from memory|common practice, no source", re.IGNORECASE)


@pytest.fixture(scope="module")
def store(tmp_path_factory: pytest.TempPathFactory) -> CompareArchive:
    return stock(tmp_path_factory.mktemp("units-web"))


@pytest.fixture(scope="module")
def server(store: CompareArchive) -> Iterator[LiveServer]:
    from server.app import create_app

    with LiveServer(create_app(store.root)) as live:
        yield live


def _clean(text: str, where: str) -> None:
    assert not RAD.search(text), f"{where} shows a radian unit: {RAD.search(text)}"
    assert not NOTES.search(text), f"{where} shows a bibliography note"


def _significant(text: str) -> int:
    mantissa = text.lstrip("-").split("e")[0].replace(".", "").lstrip("0")
    return len(mantissa.rstrip("0")) if "." not in text.split("e")[0] else len(mantissa)


def _kpi_cells(page: Any, table: str) -> dict[str, list[str]]:
    return page.eval_on_selector_all(
        f"{table} tr[data-kpi]",
        "rows => Object.fromEntries(rows.map(r => [r.dataset.kpi,"
        " [...r.querySelectorAll('td')].map(td => td.textContent.trim())]))",
    )


def _check_kpi_table(rows: dict[str, list[str]], where: str) -> None:
    # Columns: KPI, Unit, Better, A, B, B − A, %, interval, verdict.
    assert rows["roll_error_rms"][1] == "deg", where
    assert rows["roll_error_iae"][1] == "deg*s", where
    shares = [k for k in rows if k.endswith(".saturation_share")]
    assert shares and all(rows[k][1] == "%" for k in shares), where
    for key, cells in rows.items():
        for text in cells[3:6]:
            if text not in ("–", ""):
                assert _significant(text) <= 3, f"{where}: {key} shows {text}"


def test_runs_and_run_page_read_deg_and_percent(
    page: Any, server: LiveServer, store: CompareArchive
) -> None:
    page.goto(server.url + "/")
    page.wait_for_selector(f"tr[data-run-id='{store.a}'] .badge", timeout=30_000)
    badges = page.eval_on_selector_all(
        f"tr[data-run-id='{store.a}'] .badge",
        "bs => Object.fromEntries(bs.map(b => [b.dataset.kpi,"
        " b.querySelector('.badge-value').textContent]))",
    )
    assert badges["roll_error_rms"].endswith(" deg")
    assert badges["worst_saturation_share"].endswith(" %")
    _clean(page.inner_text("body"), "runs page")

    page.goto(f"{server.url}/run.html?id={store.a}")
    page.wait_for_selector("body[data-charts-ready='1']", timeout=60_000)
    rows = page.eval_on_selector_all(
        ".chart", "cs => cs.flatMap(c => c.stripChart.rows.map(r => [r.label, r.unit]))"
    )
    units = dict(rows)
    assert units["roll"] == "deg" and units["roll error"] == "deg"
    assert units["yaw rate"] == "deg/s"
    # The KPI detail: roll RMS in deg, saturated shares in %.
    detail = page.text_content("#kpi-detail") or ""
    assert re.search(r"rms\s*[-\d.e]+ deg", detail), detail[:400]
    assert re.search(r"saturated share\s*[-\d.e]+ %", detail), detail[:400]
    _clean(page.text_content("body") or "", "run page")
    assert page.page_errors == []


def test_compare_page_and_report_read_deg_and_percent(
    page: Any, server: LiveServer, store: CompareArchive, tmp_path: Path
) -> None:
    page.goto(f"{server.url}/compare.html?a={store.a}&b={store.b}&n_boot={N_BOOT}")
    page.wait_for_selector("body[data-loaded='1']", timeout=60_000)
    assert page.locator("#error").is_hidden()
    _check_kpi_table(_kpi_cells(page, "#kpi-table"), "compare page")
    titles = page.eval_on_selector_all(
        "#charts .chart", "ds => ds.map(d => [d.dataset.signal, d.layout.title.text])"
    )
    by_signal = dict(titles)
    assert by_signal["roll_error"].endswith("[deg]")
    # The project's chart look: no stock plotly toolbar (item 14).
    assert page.locator("#charts .modebar").count() == 0
    _clean(page.inner_text("body"), "compare page")
    assert page.page_errors == []

    comp, runs_a, runs_b = compare_archived(
        Archive(store.root), [store.a], [store.b], n_boot=N_BOOT
    )
    path = tmp_path / "report.html"
    path.write_text(build_report(comp, overlay(comp, runs_a, runs_b)), encoding="utf-8")
    page.goto(path.as_uri())
    page.wait_for_selector(".js-plotly-plot .main-svg", timeout=30_000)
    _check_kpi_table(_kpi_cells(page, "table.kpis"), "report")
    assert "Roll error [deg]" in page.inner_text("body") or page.eval_on_selector_all(
        ".js-plotly-plot .gtitle", "ts => ts.some(t => t.textContent.includes('[deg]'))"
    )
    assert page.locator(".modebar").count() == 0
    # The event legend and folded segment tables (item 13).
    assert page.locator("#event-legend").count() == 1
    folded = page.eval_on_selector_all("details.segment", "ds => ds.map(d => d.open)")
    assert folded and not any(folded)
    _clean(page.inner_text("body"), "report")
