"""CI never passes with the browser tests skipped (issue 18 item 5); no browser needed."""

from __future__ import annotations

from pathlib import Path

from tests.web.conftest import chromium_missing, in_ci

ROOT = Path(__file__).resolve().parents[2]


def test_a_missing_chromium_skips_locally_and_fails_under_ci(tmp_path: Path) -> None:
    absent = tmp_path / "chromium"
    skip = chromium_missing(absent, {})
    assert skip is not None and skip[0] == "skip" and str(absent) in skip[1]
    fail = chromium_missing(absent, {"CI": "true"})
    assert fail is not None and fail[0] == "fail" and "make chromium" in fail[1]
    assert chromium_missing(absent, {"CI": "false"}) == skip
    absent.write_text("")  # present: the tests run
    assert chromium_missing(absent, {"CI": "true"}) is None


def test_ci_values() -> None:
    assert in_ci({"CI": "true"}) and in_ci({"CI": "1"}) and in_ci({"CI": "True"})
    assert not in_ci({}) and not in_ci({"CI": ""}) and not in_ci({"CI": "0"})


def test_the_make_target_checks_the_path_the_tests_use() -> None:
    # The browser tests need /usr/bin/chromium (tests/web/live_server.py); a chromium found
    # elsewhere on PATH would leave them skipped, so `make chromium` must test that path.
    makefile = (ROOT / "Makefile").read_text(encoding="utf-8")
    assert "command -v chromium" not in makefile
    assert "CHROMIUM := /usr/bin/chromium" in makefile
    assert "test -x $(CHROMIUM)" in makefile
