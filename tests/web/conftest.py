"""Browser-test fixtures: the real app under uvicorn on 127.0.0.1 and Debian's Chromium.

Never downloads a browser: the tests use /usr/bin/chromium and skip, saying so,
when it is absent (CI installs it with `make chromium`). Under ``CI=true`` an
absent Chromium fails the run instead, so CI never passes with the browser
tests skipped.
"""

from __future__ import annotations

import os
from collections.abc import Iterator, Mapping
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


def in_ci(environ: Mapping[str, str]) -> bool:
    """True when ``CI`` is set to a true value (as CI services set it: ``CI=true``)."""
    return environ.get("CI", "").strip().lower() in {"1", "true", "yes", "on"}


def chromium_missing(path: Path, environ: Mapping[str, str]) -> tuple[str, str] | None:
    """None when Chromium is at ``path``; else ("skip" or "fail", the message).

    Outside CI a missing browser skips the browser tests, saying so; under CI
    it fails them, so a run without the browser can never pass as green.
    """
    if path.exists():
        return None
    msg = f"{path} is absent: install Debian's chromium (make chromium) to run the browser tests"
    if in_ci(environ):
        return "fail", f"{msg}. CI is set, and CI may not pass with the browser tests skipped."
    return "skip", msg


@pytest.fixture(scope="session")
def browser() -> Iterator[Any]:
    missing = chromium_missing(CHROMIUM, os.environ)
    if missing is not None:
        action, msg = missing
        if action == "fail":
            pytest.fail(msg, pytrace=False)
        pytest.skip(msg)
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
