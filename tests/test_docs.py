"""The README documents every key a user can write (keeps the guide true)."""

from __future__ import annotations

from pathlib import Path

from analysis.detect.limits import LIMIT_SPECS
from analysis.profile import THRESHOLD_SPECS

README = (Path(__file__).resolve().parents[1] / "README.md").read_text(encoding="utf-8")


def test_every_threshold_key_is_documented():
    missing = [k for k in THRESHOLD_SPECS if f"`{k}`" not in README]
    assert missing == []


def test_every_limit_key_is_documented():
    missing = [k for k in LIMIT_SPECS if f"`{k}`" not in README]
    assert missing == []


def test_readme_gives_the_two_commands_first():
    head = README.split("## ")[0]
    assert "make demo" in head and "make test" in head
    assert "not a safety system" in head
