"""Distance marks stored per course, so every comparison on it shares its segments.

A test team that knows its course (the gate at 12.5 m, the wet plate at 40 m, ...)
stores the boundaries once; comparisons of runs on that course then split it at
those marks instead of at curvature changes. Stored next to the profiles and maps:
``<archive>/configs/courses/<course>.toml`` with ``marks_m = [...]``.
"""

from __future__ import annotations

import math
import os
import re
import tomllib
from collections.abc import Sequence

from analysis.archive.location import Location
from analysis.errors import CompareError

COURSE_NAME_RE = re.compile(r"^[A-Za-z0-9_-]{1,80}$")


def _path(root: str | os.PathLike[str] | Location, course: str) -> Location:
    if not COURSE_NAME_RE.match(course):
        raise CompareError(
            f"Course name {course!r} cannot name a marks file: use letters, digits, '_' and '-' "
            f"(1-80 characters) in the course name to store marks for it."
        )
    return Location.of(root) / "configs" / "courses" / f"{course}.toml"


def check_marks(marks_m: Sequence[float]) -> list[float]:
    """Check distance marks: finite, >= 0, strictly increasing. [m]"""
    marks = [float(m) for m in marks_m]
    if not marks:
        raise CompareError("Give at least one distance mark in metres, such as 12.5,40,75.")
    if not all(math.isfinite(m) and m >= 0 for m in marks):
        raise CompareError(f"Distance marks must be finite metres >= 0, found {marks}.")
    if any(b <= a for a, b in zip(marks, marks[1:], strict=False)):
        raise CompareError(f"Distance marks must increase along the course, found {marks}.")
    return marks


def save_course_marks(
    root: str | os.PathLike[str] | Location, course: str, marks_m: Sequence[float]
) -> Location:
    """Store (or replace) the distance marks of a course; return the file's location."""
    marks = check_marks(marks_m)
    path = _path(root, course)
    path.write_text(f"# distance marks of course {course} [m]\nmarks_m = {marks}\n")
    return path


def course_marks(root: str | os.PathLike[str] | Location, course: str | None) -> list[float] | None:
    """The stored marks of a course, or None when none are stored (or no course)."""
    if not course or not COURSE_NAME_RE.match(course):
        return None
    path = _path(root, course)
    if not path.is_file():
        return None
    try:
        data = tomllib.loads(path.read_text(encoding="utf-8"))
    except tomllib.TOMLDecodeError as exc:
        raise CompareError(f"{path} is not valid TOML ({exc}); store the marks again.") from exc
    return check_marks(data.get("marks_m", []))


def delete_course_marks(root: str | os.PathLike[str] | Location, course: str) -> bool:
    """Forget a course's marks; True if there were any."""
    path = _path(root, course)
    if path.is_file():
        path.unlink()
        return True
    return False


# --- the start line of a closed loop --------------------------------------------------


def _start_path(root: str | os.PathLike[str] | Location, course: str) -> Location:
    _path(root, course)  # checks the course name
    return Location.of(root) / "configs" / "courses" / f"{course}.start.toml"


def check_start_line(start_m: float) -> float:
    """Check a start line: a finite distance >= 0 from a run's start. [m]"""
    value = float(start_m)
    if not (math.isfinite(value) and value >= 0):
        raise CompareError(
            f"The start line must be a finite distance >= 0 m from where runs start, found "
            f"{start_m}. Give it in metres, such as 12.5."
        )
    return value


def save_start_line(
    root: str | os.PathLike[str] | Location, course: str, start_m: float
) -> Location:
    """Store (or replace) the start line of a loop course; return the file's path.

    The start line is the distance from where the course's runs start to the line
    that starts each lap, as odometry measures it. [m]
    """
    value = check_start_line(start_m)
    path = _start_path(root, course)
    path.write_text(
        f"# start line of course {course}: metres from a run's start [m]\nlap_start_m = {value}\n"
    )
    return path


def course_start_line(root: str | os.PathLike[str] | Location, course: str | None) -> float | None:
    """The stored start line of a course, or None when none is stored (or no course). [m]"""
    if not course or not COURSE_NAME_RE.match(course):
        return None
    path = _start_path(root, course)
    if not path.is_file():
        return None
    try:
        data = tomllib.loads(path.read_text(encoding="utf-8"))
    except tomllib.TOMLDecodeError as exc:
        raise CompareError(
            f"{path} is not valid TOML ({exc}); store the start line again."
        ) from exc
    if "lap_start_m" not in data:
        raise CompareError(f"{path} has no lap_start_m; store the start line again.")
    return check_start_line(data["lap_start_m"])


def delete_start_line(root: str | os.PathLike[str] | Location, course: str) -> bool:
    """Forget a course's start line; True if there was one."""
    path = _start_path(root, course)
    if path.is_file():
        path.unlink()
        return True
    return False
