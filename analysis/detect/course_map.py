"""The run's path in the ground plane, dead reckoned from heading and speed.

A test engineer asks "where on the course did it happen"; logs of a balancing robot
rarely carry a position, but they carry a heading (the yaw estimate, or the gyro yaw
rate to integrate) and a forward speed (the velocity estimate, or the wheels). This
module integrates them into a path and places the run's samples and events on it.
The path drifts (heading bias, speed scale error): it is a sketch of where things
happened, not a survey.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from analysis import catalogue as cat
from analysis.kinematics import column, rim_speed
from analysis.profile import RobotProfile

#: Largest number of path points sent to a page. [-]
MAX_PATH_POINTS = 4000


@dataclass(frozen=True)
class DeadReckoning:
    """A dead-reckoned path, one point per sample of the frame.

    Attributes
    ----------
    t : ndarray
        Sample times. [s]
    x, y : ndarray
        Position in the ground plane, x along the first heading, y to its left
        (ISO 8855 axes at the start). [m]
    heading : ndarray
        Heading, positive turning left, unwrapped. [rad]
    distance : ndarray
        Distance travelled along the path (integral of |speed|). [m]
    heading_source, speed_source : str
        The signal each came from, for the page to say.
    """

    t: np.ndarray
    x: np.ndarray
    y: np.ndarray
    heading: np.ndarray
    distance: np.ndarray
    heading_source: str
    speed_source: str


def _cumtrapz(t: np.ndarray, y: np.ndarray) -> np.ndarray:
    """Cumulative trapezoid integral of ``y`` over ``t``, starting at 0 (NaN counts as 0)."""
    y = np.nan_to_num(np.asarray(y, dtype=float))
    out = np.zeros(len(t))
    if len(t) > 1:
        out[1:] = np.cumsum(0.5 * (y[1:] + y[:-1]) * np.diff(t))
    return out


def dead_reckon(
    t: np.ndarray,
    speed: np.ndarray,
    *,
    yaw: np.ndarray | None = None,
    yaw_rate: np.ndarray | None = None,
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Integrate heading and forward speed into a path in the ground plane.

    Parameters
    ----------
    t : ndarray
        Sample times, increasing. [s]
    speed : ndarray
        Forward speed, heading frame. [m/s]
    yaw : ndarray, optional
        Heading estimate, positive turning left; used when given (unwrapped). [rad]
    yaw_rate : ndarray, optional
        Gyro yaw rate, integrated when no ``yaw`` is given. [rad/s]

    Returns
    -------
    (x, y, heading, distance) : tuple of ndarray
        Position [m], heading [rad] and distance travelled [m] per sample.

    Notes
    -----
    Planar unicycle kinematics, ``x' = v cos(psi)``, ``y' = v sin(psi)``
    (e.g. Siegwart, Nourbakhsh & Scaramuzza, *Introduction to Autonomous Mobile
    Robots*, 2nd ed., MIT Press, 2011, Ch. 3), integrated with the trapezoid rule.
    Samples where a signal is NaN (a gap) contribute no motion.
    """
    t = np.asarray(t, dtype=float)
    v = np.asarray(speed, dtype=float)
    if yaw is not None:
        psi = np.asarray(yaw, dtype=float)
        finite = np.isfinite(psi)
        if not finite.any():
            raise ValueError("dead_reckon: the yaw estimate holds no finite value")
        psi = np.interp(t, t[finite], np.unwrap(psi[finite]))
        psi = psi - psi[0] if len(psi) else psi
    elif yaw_rate is not None:
        psi = _cumtrapz(t, yaw_rate)
    else:
        raise ValueError("dead_reckon needs yaw or yaw_rate")
    x = _cumtrapz(t, v * np.cos(psi))
    y = _cumtrapz(t, v * np.sin(psi))
    distance = _cumtrapz(t, np.abs(v))
    return x, y, psi, distance


def course_path(frame: pd.DataFrame, profile: RobotProfile) -> DeadReckoning | None:
    """Dead-reckon a run's frame: heading from ``yaw`` or the gyro, speed from ``vel_x`` or the wheels.

    Parameters
    ----------
    frame : DataFrame
        The run's frame (catalogue names, SI units, column ``t``).
    profile : RobotProfile
        Wheel radius and which way the wheel encoders are referenced.

    Returns
    -------
    DeadReckoning or None
        None when the frame has no heading (neither ``yaw`` nor ``yaw_rate``) or
        no speed (neither ``vel_x`` nor both wheel speeds).
    """
    t = frame[cat.T].to_numpy(dtype=float)
    yaw = column(frame, cat.YAW)
    if yaw is not None and not np.isfinite(yaw).any():
        yaw = None  # a mapped but empty estimate: integrate the gyro instead
    yaw_rate = column(frame, cat.YAW_RATE)
    speed = column(frame, cat.VEL_X)
    speed_source = cat.VEL_X
    if speed is None:
        wheels = profile.wheels()
        rates = [column(frame, cat.actuator_signal(a.name, cat.VEL)) for a in wheels.values()]
        if len(rates) == 2 and all(r is not None for r in rates):
            pitch_rate = column(frame, cat.PITCH_RATE)
            relative = profile.wheel_encoder_reference != "ground"
            mean_rate = 0.5 * (rates[0] + rates[1])  # type: ignore[operator]
            speed = rim_speed(mean_rate, pitch_rate if relative else None, profile.wheel_radius)
            speed_source = "wheels"
    if speed is None or (yaw is None and yaw_rate is None) or len(t) < 2:
        return None
    heading_source = cat.YAW if yaw is not None else cat.YAW_RATE
    x, y, psi, dist = dead_reckon(t, speed, yaw=yaw, yaw_rate=None if yaw is not None else yaw_rate)
    return DeadReckoning(t, x, y, psi, dist, heading_source, speed_source)


def thin_indices(n: int, budget: int = MAX_PATH_POINTS) -> np.ndarray:
    """Evenly spaced sample indices, at most ``budget``, always with the first and last."""
    if n <= budget:
        return np.arange(n)
    return np.unique(np.linspace(0, n - 1, budget).round().astype(int))
