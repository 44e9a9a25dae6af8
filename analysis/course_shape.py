"""The shape of a driven course: distance travelled and curvature against distance.

A run's position along its course is its distance travelled, the integral of
the forward speed magnitude ``|vel_x|`` (or wheel odometry when the log has no
velocity estimate). Its course shape is the heading rate per metre (yaw rate
against distance, the path curvature) on a uniform distance grid: unlike yaw
rate against time it does not change with the speed the course was driven at.
The alignment of two runs (:mod:`analysis.compare.align`) and the lap detection
(:mod:`analysis.laps`) both compare these traces by normalised cross-correlation.

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
#: Most grid points per run sample (20 x 5 cm = 1 m per sample: 100 m/s at 100 Hz). [-]
MAX_GRID_PER_SAMPLE = 20
#: Width of the moving average that smooths the curvature. [m]
#: (common practice, no source: wide enough to average gyro noise over a few
#: wheel turns, narrow against the shortest curve of a test course)
SMOOTH_M = 1.0


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
    n = int(np.floor(length / grid_m)) + 1 if np.isfinite(length) else -1
    if not 0 < n <= MAX_GRID_PER_SAMPLE * t.size + 1000:
        # Memory follows the sample count, never the distance: a far-off time stamp
        # with motion across it would otherwise ask for a grid of billions of points.
        raise CompareError(
            f"The run's distance travelled, {length:.4g} m from {t.size} samples, is more "
            f"than {MAX_GRID_PER_SAMPLE * grid_m:g} m per sample: its time stamps hold a "
            f"gap the speed was integrated across. Fix the time stamps of the log."
        )
    grid = grid_m * np.arange(n)
    # Keep the first sample at each distance so np.interp sees increasing abscissae.
    _, first = np.unique(s, return_index=True)
    heading = np.interp(grid, s[first], psi[first])
    kappa = np.gradient(heading, grid_m) if n > 1 else np.zeros(n)
    width = max(1, int(round(smooth_m / grid_m)))
    kappa = uniform_filter1d(kappa, size=width, mode="nearest")
    return CourseTrace(distance=s, grid=grid, curvature=kappa, length_m=length)


def normalised_xcorr(
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
