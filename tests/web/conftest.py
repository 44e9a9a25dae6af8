"""Browser-test fixtures: the real app under uvicorn on 127.0.0.1 and Debian's Chromium.

Never downloads a browser: the tests use /usr/bin/chromium and skip, saying so,
when it is absent (CI installs it with `make chromium`).
"""

from __future__ import annotations

from collections.abc import Iterator
from pathlib import Path
from typing import Any

import pytest

from tests.server.dashboard_fixtures import RunInputs, write_demo_inputs
from tests.web.live_server import CHROMIUM as CHROMIUM_PATH
from tests.web.live_server import CHROMIUM_ARGS, LiveServer

CHROMIUM = Path(CHROMIUM_PATH)
ARTIFACTS = Path(__file__).resolve().parents[2] / "test-artifacts"


@pytest.fixture(scope="session")
def web_demo_inputs(tmp_path_factory: pytest.TempPathFactory) -> RunInputs:
    return write_demo_inputs(tmp_path_factory.mktemp("web-demo-inputs"))


@pytest.fixture(scope="session")
def live(tmp_path_factory: pytest.TempPathFactory) -> Iterator[LiveServer]:
    from server.app import create_app

    app = create_app(tmp_path_factory.mktemp("web-archive"))
    with LiveServer(app) as server:
        yield server


@pytest.fixture(scope="session")
def browser() -> Iterator[Any]:
    if not CHROMIUM.exists():
        pytest.skip(f"{CHROMIUM} is absent: install Debian's chromium (make chromium) to run it")
    from playwright.sync_api import sync_playwright

    with sync_playwright() as p:
        b = p.chromium.launch(executable_path=str(CHROMIUM), headless=True, args=CHROMIUM_ARGS)
        yield b
        b.close()


@pytest.fixture()
def page(browser: Any) -> Iterator[Any]:
    context = browser.new_context(viewport={"width": 1440, "height": 1000})
    pg = context.new_page()
    errors: list[str] = []
    pg.on("pageerror", lambda exc: errors.append(str(exc)))
    pg.page_errors = errors  # type: ignore[attr-defined]
    yield pg
    context.close()


@pytest.fixture(scope="session")
def artifacts() -> Path:
    ARTIFACTS.mkdir(exist_ok=True)
    return ARTIFACTS
