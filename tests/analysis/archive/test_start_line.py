"""The start line stored for a loop course (analysis.archive.courses)."""

from __future__ import annotations

import pytest

from analysis.archive.courses import (
    course_marks,
    course_start_line,
    delete_start_line,
    save_course_marks,
    save_start_line,
)
from analysis.errors import CompareError


def test_start_line_is_stored_read_and_cleared_beside_the_marks(tmp_path) -> None:
    assert course_start_line(tmp_path, "gullhaven-ring") is None
    save_course_marks(tmp_path, "gullhaven-ring", [20.0, 55.0])
    save_start_line(tmp_path, "gullhaven-ring", 12.5)
    assert course_start_line(tmp_path, "gullhaven-ring") == 12.5
    assert course_marks(tmp_path, "gullhaven-ring") == [20.0, 55.0]  # untouched
    save_start_line(tmp_path, "gullhaven-ring", 3)
    assert course_start_line(tmp_path, "gullhaven-ring") == 3.0
    assert delete_start_line(tmp_path, "gullhaven-ring")
    assert not delete_start_line(tmp_path, "gullhaven-ring")
    assert course_start_line(tmp_path, "gullhaven-ring") is None
    assert course_start_line(tmp_path, None) is None


@pytest.mark.parametrize("bad", [-1.0, float("nan"), float("inf")])
def test_bad_start_line_is_refused_with_what_to_do(tmp_path, bad) -> None:
    with pytest.raises(CompareError, match="finite distance >= 0 m"):
        save_start_line(tmp_path, "gullhaven-ring", bad)


def test_broken_start_line_file_is_reported(tmp_path) -> None:
    path = save_start_line(tmp_path, "ring", 4.0)
    path.write_text("lap_start_m = [", encoding="utf-8")
    with pytest.raises(CompareError, match="not valid TOML"):
        course_start_line(tmp_path, "ring")
