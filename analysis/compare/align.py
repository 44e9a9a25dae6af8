"""Align two runs of one course by the distance travelled along it.

Each run's position along the course is its distance travelled: the integral of
the forward speed magnitude ``|vel_x|``, or wheel odometry when the log has no
velocity estimate. Two runs rarely start at the same spot, so the start offset
is found from the shape of the course itself: the heading rate per metre
(yaw rate against distance, the path curvature) of both runs is put on a common
distance grid and the offset that maximises their normalised cross-correlation
is taken. Curvature, unlike yaw rate against time, does not change with the
speed the course was driven at.

References
----------
.. [1] J. S. Bendat and A. G. Piersol, Random Data: Analysis and Measurement
   Procedures, 4th ed. Wiley, 2010. Section 11.4 (cross-correlation estimates).
.. [2] R. Siegwart, I. R. Nourbakhsh and D. Scaramuzza, Introduction to
   Autonomous Mobile Robots, 2nd ed. MIT Press, 2011. Section 3.2.1
   (differential-drive kinematics).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from analysis.course_shape import (
    GRID_M,
    SMOOTH_M,
    CourseTrace,
    course_distance,
    course_trace,
    forward_speed,
)
from analysis.course_shape import normalised_xcorr as _normalised_xcorr
from analysis.profile import RobotProfile

__all__ = [
    "GRID_M",
    "SMOOTH_M",
    "Alignment",
    "CourseTrace",
    "align_runs",
    "align_traces",
    "course_distance",
    "course_trace",
    "forward_speed",
]

#: Below this peak correlation of the curvature the runs are not the same course. [-]
#: (common practice, no source)
MIN_CORRELATION = 0.6
#: Above this relative difference of the lengths the runs are not the same course. [-]
#: (common practice, no source: a few metres of extra manoeuvring on a course of
#: a hundred metres stay well inside it)
MAX_LENGTH_DIFF = 0.25
#: The largest start offset searched, as a share of the shorter run. [-]
MAX_OFFSET_SHARE = 0.3


@dataclass(frozen=True)
class Alignment:
    """Where run B sits on run A's course.

    Attributes
    ----------
    offset_m : float
        A's distance at the spot where B's distance is 0: a place B reaches at
        distance ``s`` is at ``s + offset_m`` on A's course. [m]
    correlation : float
        Normalised cross-correlation of the two curvature traces at that offset. [-]
    same_course : bool
        Whether the runs look like the same course (correlation and lengths).
    reason : str
        Plain sentence explaining ``same_course``.
    length_a_m, length_b_m : float
        Distance travelled by each run. [m]
    overlap_start_m, overlap_end_m : float
        Stretch of A's course that both runs drove. [m]
    """

    offset_m: float
    correlation: float
    same_course: bool
    reason: str
    length_a_m: float
    length_b_m: float
    overlap_start_m: float
    overlap_end_m: float

    def to_dict(self) -> dict[str, object]:
        """JSON shape."""
        return {
            "offset_m": _finite(self.offset_m),
            "correlation": _finite(self.correlation),
            "same_course": self.same_course,
            "reason": self.reason,
            "length_a_m": _finite(self.length_a_m),
            "length_b_m": _finite(self.length_b_m),
            "overlap_start_m": _finite(self.overlap_start_m),
            "overlap_end_m": _finite(self.overlap_end_m),
        }


def _finite(x: float) -> float | None:
    return float(x) if np.isfinite(x) else None


def align_traces(
    a: CourseTrace,
    b: CourseTrace,
    *,
    max_offset_m: float | None = None,
    min_correlation: float = MIN_CORRELATION,
    max_length_diff: float = MAX_LENGTH_DIFF,
) -> Alignment:
    """Find B's start offset on A's course from two curvature traces on one grid spacing.

    Parameters
    ----------
    a, b : CourseTrace
        From :func:`course_trace` with the same ``grid_m``.
    max_offset_m : float, optional
        Largest offset searched either way; default :data:`MAX_OFFSET_SHARE` of
        the shorter run. [m]
    min_correlation : float
        Below this the runs are declared different courses. [-]
    max_length_diff : float
        Above this relative length difference likewise. [-]

    Returns
    -------
    Alignment
    """
    la, lb = a.length_m, b.length_m
    if a.grid.size < 3 or b.grid.size < 3:
        return Alignment(
            0.0, float("nan"), False,
            f"A run is too short to align (lengths {la:.1f} m and {lb:.1f} m).",
            la, lb, 0.0, min(la, lb),
        )  # fmt: skip
    dx = float(a.grid[1] - a.grid[0])
    shorter = min(a.grid.size, b.grid.size)
    if max_offset_m is None:
        max_offset_m = MAX_OFFSET_SHARE * min(la, lb)
    lags, r = _normalised_xcorr(a.curvature, b.curvature, min_overlap=max(3, shorter // 2))
    r = np.where(np.abs(lags) * dx <= max_offset_m, r, np.nan)
    if not np.isfinite(r).any():
        return Alignment(
            0.0, float("nan"), False,
            "The course shapes cannot be correlated (a run drives straight only, or they "
            "hardly overlap); per-segment comparison needs a course with curves.",
            la, lb, 0.0, min(la, lb),
        )  # fmt: skip
    i = int(np.nanargmax(r))
    k = float(lags[i])
    if 0 < i < r.size - 1 and np.isfinite(r[i - 1]) and np.isfinite(r[i + 1]):
        den = r[i - 1] - 2.0 * r[i] + r[i + 1]
        if den < 0:
            # Parabola through the peak and its neighbours (common practice, no source).
            k += 0.5 * (r[i - 1] - r[i + 1]) / den
    corr = float(r[i])
    # y[n + k] matches x[n]: B at s + k dx is A at s. Rounded to 1 um, far below
    # what odometry resolves, so that a run aligned with itself gets exactly 0.
    offset = round(float(-k * dx), 6) + 0.0
    length_diff = abs(la - lb) / max(la, lb, 1e-9)
    problems = []
    if corr < min_correlation:
        problems.append(
            f"the course shapes correlate only {corr:.2f} (at least {min_correlation:.2f} "
            f"expected for one course)"
        )
    if length_diff > max_length_diff:
        problems.append(
            f"their lengths differ by {100 * length_diff:.0f}% ({la:.1f} m and {lb:.1f} m; at "
            f"most {100 * max_length_diff:.0f}% expected)"
        )
    if problems:
        reason = (
            "These runs do not look like the same course: "
            + " and ".join(problems)
            + ". Per-segment comparison is refused; only the overall KPIs are compared."
        )
    else:
        reason = (
            f"Same course: shapes correlate {corr:.2f} with B starting {offset:+.2f} m "
            f"along A's course."
        )
    start = float(max(0.0, offset))
    end = float(min(la, lb + offset))
    return Alignment(offset, corr, not problems, reason, la, lb, start, max(start, end))


def align_runs(
    frame_a: pd.DataFrame,
    frame_b: pd.DataFrame,
    profile_a: RobotProfile | None = None,
    profile_b: RobotProfile | None = None,
    **kwargs: float,
) -> Alignment:
    """Align run B on run A's course by distance and curvature cross-correlation.

    Parameters
    ----------
    frame_a, frame_b : DataFrame
        Column ``t`` [s], ``yaw_rate`` [rad/s] and ``vel_x`` [m/s] (or wheel
        velocities with the profile).
    profile_a, profile_b : RobotProfile, optional
        For wheel odometry when ``vel_x`` is missing.
    **kwargs
        Passed to :func:`align_traces` (``max_offset_m``, ``min_correlation``,
        ``max_length_diff``).

    Returns
    -------
    Alignment
        Offset [m], peak correlation [-], the same-course decision and its reason.

    Notes
    -----
    The offset maximises the normalised cross-correlation of the curvature of
    both runs against distance ([1], Section 11.4), refined to a fraction of the
    grid spacing by a parabola through the peak.
    """
    return align_traces(
        course_trace(frame_a, profile_a), course_trace(frame_b, profile_b), **kwargs
    )
