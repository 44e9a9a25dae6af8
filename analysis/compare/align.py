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
from scipy import signal as sps
from scipy.ndimage import uniform_filter1d

from analysis import catalogue as cat
from analysis.errors import CompareError
from analysis.profile import RobotProfile

#: Spacing of the distance grid the course shape is compared on. [m]
GRID_M = 0.05
#: Width of the moving average that smooths the curvature. [m]
#: (common practice, no source: wide enough to average gyro noise over a few
#: wheel turns, narrow against the shortest curve of a test course)
SMOOTH_M = 1.0
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
class CourseTrace:
    """One run's course shape on a uniform distance grid.

    Attributes
    ----------
    distance : ndarray
        Distance travelled at each sample of the run. [m]
    grid : ndarray
        Uniform distance grid from 0 to the run's length. [m]
    curvature : ndarray
        Heading rate per metre on the grid, positive turning left. [rad/m]
    length_m : float
        Total distance travelled. [m]
    """

    distance: np.ndarray
    grid: np.ndarray
    curvature: np.ndarray
    length_m: float


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


def _filled(frame: pd.DataFrame, name: str) -> np.ndarray:
    """Column as float with inner NaN runs interpolated and the ends held at 0."""
    s = pd.Series(frame[name].to_numpy(dtype=float))
    return s.interpolate(limit_area="inside").fillna(0.0).to_numpy()


def _has(frame: pd.DataFrame, name: str) -> bool:
    return name in frame.columns and bool(np.isfinite(frame[name].to_numpy(dtype=float)).any())


def _cumtrapz(t: np.ndarray, f: np.ndarray) -> np.ndarray:
    out = np.zeros(t.size)
    if t.size > 1:
        out[1:] = np.cumsum(0.5 * (f[1:] + f[:-1]) * np.diff(t))
    return out


def forward_speed(frame: pd.DataFrame, profile: RobotProfile | None = None) -> np.ndarray:
    """Forward speed magnitude of a run, from ``vel_x`` or wheel odometry.

    Parameters
    ----------
    frame : DataFrame
        Column ``t`` plus canonical signals. [SI]
    profile : RobotProfile, optional
        Needed only for odometry (wheel radius, wheel names, encoder reference).

    Returns
    -------
    ndarray
        ``|v|`` at each sample. [m/s]

    Notes
    -----
    Without ``vel_x`` the midpoint speed of a differential drive is
    ``v = r (w_l + w_r) / 2`` ([2], Eq. 3.9 in the form of wheel speeds), with
    the leg's pitch rate added to each encoder rate when the encoder measures
    the wheel against its leg (DESIGN.md, wheel encoders).
    """
    if _has(frame, cat.VEL_X):
        return np.abs(_filled(frame, cat.VEL_X))
    if profile is None:
        raise CompareError(
            f"The run has no {cat.VEL_X} and no robot profile was given for wheel odometry. "
            f"Map a forward velocity to {cat.VEL_X} in the channel map, or pass the profile."
        )
    wheels = profile.wheels()
    names = [cat.actuator_signal(wheels[s].name, cat.VEL) for s in ("l", "r")]
    missing = [n for n in names if not _has(frame, n)]
    if missing:
        raise CompareError(
            f"Cannot measure distance along the course: the run has no {cat.VEL_X} and no "
            f"{', '.join(missing)} (columns found: {', '.join(map(str, frame.columns[:12]))}). "
            f"Map {cat.VEL_X} or both wheel velocities in the channel map."
        )
    w = 0.5 * (_filled(frame, names[0]) + _filled(frame, names[1]))
    if profile.wheel_encoder_reference == "leg" and _has(frame, cat.PITCH_RATE):
        w = w + _filled(frame, cat.PITCH_RATE)
    return np.abs(profile.wheel_radius * w)  # [2] Eq. 3.9


def course_distance(frame: pd.DataFrame, profile: RobotProfile | None = None) -> np.ndarray:
    """Distance travelled along the course at each sample.

    Parameters
    ----------
    frame : DataFrame
        Column ``t`` [s] plus ``vel_x`` [m/s], or wheel velocities [rad/s].
    profile : RobotProfile, optional
        For wheel odometry when ``vel_x`` is missing.

    Returns
    -------
    ndarray
        Non-decreasing distance from the first sample. [m]

    Notes
    -----
    ``s(t) = integral |v| dt`` by the trapezoid rule; see :func:`forward_speed`.
    """
    t = frame[cat.T].to_numpy(dtype=float)
    return _cumtrapz(t, forward_speed(frame, profile))


def course_trace(
    frame: pd.DataFrame,
    profile: RobotProfile | None = None,
    *,
    grid_m: float = GRID_M,
    smooth_m: float = SMOOTH_M,
) -> CourseTrace:
    """Put a run's curvature (heading rate per metre) on a uniform distance grid.

    Parameters
    ----------
    frame : DataFrame
        Column ``t`` [s], ``yaw_rate`` [rad/s] and a speed source (see
        :func:`course_distance`).
    profile : RobotProfile, optional
        For wheel odometry when ``vel_x`` is missing.
    grid_m : float
        Grid spacing. [m]
    smooth_m : float
        Moving-average width applied to the curvature. [m]

    Returns
    -------
    CourseTrace

    Notes
    -----
    Heading ``psi(t) = integral yaw_rate dt`` is interpolated onto the distance
    grid and differentiated, ``kappa = d psi / d s``; this avoids dividing the
    yaw rate by a speed that may be near zero.
    """
    if not _has(frame, cat.YAW_RATE):
        raise CompareError(
            f"The run has no {cat.YAW_RATE}, so its course shape is unknown and it cannot be "
            f"aligned. Map the gyro's vertical rate to {cat.YAW_RATE} in the channel map."
        )
    t = frame[cat.T].to_numpy(dtype=float)
    s = course_distance(frame, profile)
    psi = _cumtrapz(t, _filled(frame, cat.YAW_RATE))
    length = float(s[-1]) if s.size else 0.0
    n = int(np.floor(length / grid_m)) + 1
    grid = grid_m * np.arange(n)
    # Keep the first sample at each distance so np.interp sees increasing abscissae.
    _, first = np.unique(s, return_index=True)
    heading = np.interp(grid, s[first], psi[first])
    kappa = np.gradient(heading, grid_m) if n > 1 else np.zeros(n)
    width = max(1, int(round(smooth_m / grid_m)))
    kappa = uniform_filter1d(kappa, size=width, mode="nearest")
    return CourseTrace(distance=s, grid=grid, curvature=kappa, length_m=length)


def _normalised_xcorr(
    x: np.ndarray, y: np.ndarray, min_overlap: int
) -> tuple[np.ndarray, np.ndarray]:
    """Pearson correlation of ``x[n]`` with ``y[n + k]`` over the overlap, for every lag k.

    Returns the lags and the correlations (NaN where the overlap is shorter than
    ``min_overlap`` samples or a side is constant), [1] Section 11.4 with the
    means and variances taken over the overlapping part only.
    """
    ones_x, ones_y = np.ones(x.size), np.ones(y.size)

    def c(a: np.ndarray, b: np.ndarray) -> np.ndarray:
        return np.asarray(sps.correlate(a, b, mode="full", method="fft"))

    lags = sps.correlation_lags(y.size, x.size, mode="full")
    n = np.rint(c(ones_y, ones_x))
    sx, sy = c(ones_y, x), c(y, ones_x)
    sxx, syy = c(ones_y, x * x), c(y * y, ones_x)
    sxy = c(y, x)
    with np.errstate(invalid="ignore", divide="ignore"):
        cov = n * sxy - sx * sy
        var = (n * sxx - sx * sx) * (n * syy - sy * sy)
        r = np.where((n >= min_overlap) & (var > 0), cov / np.sqrt(np.abs(var)), np.nan)
    return lags, r


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
