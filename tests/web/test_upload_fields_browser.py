"""The Upload page's run fields in headless Chromium: start date, course picker, default name."""

from __future__ import annotations

from collections.abc import Iterator
from pathlib import Path
from typing import Any

import pytest

from analysis.archive.store import Archive
from tests.server.compare_archive import CompareArchive, stock
from tests.server.dashboard_fixtures import write_planted_inputs
from tests.web.live_server import LiveServer

pytestmark = pytest.mark.browser


@pytest.fixture(scope="module")
def store(tmp_path_factory: pytest.TempPathFactory) -> CompareArchive:
    return stock(tmp_path_factory.mktemp("upload-fields"))


@pytest.fixture(scope="module")
def server(store: CompareArchive) -> Iterator[LiveServer]:
    from server.app import create_app

    with LiveServer(create_app(store.root)) as live:
        yield live


def test_upload_offers_courses_takes_a_start_and_names_the_run(
    page: Any, server: LiveServer, store: CompareArchive, tmp_path: Path
) -> None:
    inputs = write_planted_inputs(tmp_path / "in")
    # The same log timed from boot: the page's start field gives its date.
    text = inputs.map_path.read_text(encoding="utf-8")
    assert 'time_origin = "epoch"' in text
    boot_map = tmp_path / "boot_map.toml"
    boot_map.write_text(text.replace('time_origin = "epoch"', 'time_origin = "boot"'))
    # A boot clock starts near 0: shift the log's time column (first column, seconds).
    log = inputs.logs[0]
    head, *rows = log.read_text().splitlines()
    t0 = float(rows[0].split(",")[0])
    shifted = [f"{float(r.split(',', 1)[0]) - t0:.6f},{r.split(',', 1)[1]}" for r in rows]
    log.write_text("\n".join([head, *shifted]) + "\n")
    page.goto(f"{server.url}/upload.html")
    # Courses of the stored runs (the fixture stores gullhaven-loop and gullhaven-hill).
    page.wait_for_function("() => document.querySelectorAll('#course-list option').length > 0")
    courses = page.eval_on_selector_all("#course-list option", "os => os.map(o => o.value)")
    assert courses == ["gullhaven-hill", "gullhaven-loop"]
    assert page.get_attribute("input[name=course]", "list") == "course-list"
    assert page.get_attribute("input[name=date]", "type") == "datetime-local"
    page.set_input_files("#logs", [str(p) for p in inputs.logs])
    page.set_input_files("#map-file", str(boot_map))
    page.set_input_files("#profile-file", str(inputs.profile_path))
    page.fill("input[name=course]", "gullhaven-loop")
    page.fill("input[name=date]", "2026-11-28T09:31:05")
    page.click("#submit")
    link = page.wait_for_selector("#run-link", timeout=120_000)
    run_id = (link.get_attribute("href") or "").split("=", 1)[1]
    meta = Archive(store.root).get_meta(run_id)
    assert meta["date"].startswith("2026-11-28T09:31:05")  # the start given, in UTC
    assert meta["name"] == "plant_state"  # from the file name, never "None"
    assert meta["course"] == "gullhaven-loop"
    assert page.page_errors == []
