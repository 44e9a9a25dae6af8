"""Distance marks stored per course."""

from __future__ import annotations

import pytest

from analysis.archive.courses import (
    course_marks,
    delete_course_marks,
    save_course_marks,
)
from analysis.errors import CompareError


def test_store_read_replace_clear(tmp_path):
    assert course_marks(tmp_path, "gullhaven-loop") is None
    save_course_marks(tmp_path, "gullhaven-loop", [12.5, 40, 75])
    assert course_marks(tmp_path, "gullhaven-loop") == [12.5, 40.0, 75.0]
    save_course_marks(tmp_path, "gullhaven-loop", [30])
    assert course_marks(tmp_path, "gullhaven-loop") == [30.0]
    assert delete_course_marks(tmp_path, "gullhaven-loop") is True
    assert course_marks(tmp_path, "gullhaven-loop") is None
    assert delete_course_marks(tmp_path, "gullhaven-loop") is False


@pytest.mark.parametrize(
    ("marks", "match"),
    [
        ([], "at least one"),
        ([10, 5], "increase"),
        ([float("nan")], "finite"),
        ([-1], ">= 0"),
    ],
)
def test_bad_marks_are_refused_and_nothing_is_stored(tmp_path, marks, match):
    with pytest.raises(CompareError, match=match):
        save_course_marks(tmp_path, "loop", marks)
    assert course_marks(tmp_path, "loop") is None


def test_course_name_with_path_tricks_is_refused(tmp_path):
    with pytest.raises(CompareError, match="cannot name a marks file"):
        save_course_marks(tmp_path, "../escape", [1.0])
    assert not (tmp_path.parent / "escape.toml").exists()
