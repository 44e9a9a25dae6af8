"""Shared kinematics and time-base helpers of the saturation and slip detectors.

Everything here works on whole arrays (no Python loop over samples) and on a
time base that may be uneven and may hold data gaps (see
:func:`analysis.events.data_gaps`): a derivative or a time weight never reaches
across a gap, and NaN samples (as-of join holes) count as missing.

References
----------
.. [1] R. Siegwart, I. R. Nourbakhsh and D. Scaramuzza, Introduction to
   Autonomous Mobile Robots, 2nd ed. MIT Press, 2011.
.. [2] J. L. Meriam and L. G. Kraige, Engineering Mechanics: Dynamics, 7th ed.
   Wiley, 2012 (relative velocity in a rigid body, v_B = v_A + omega x r_B/A).
.. [3] B. Fornberg, "Generation of finite difference formulas on arbitrarily
   spaced grids", Mathematics of Computation 51(184), 1988,
   doi:10.1090/S0025-5718-1988-0935077-0.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from analysis.events import data_gaps
from analysis.metrics import lowpass_zero_phase

#: Cut-off of the zero-phase low-pass on the leg length before its derivative
#: (the leg loop's bandwidth is about 3 Hz; common practice, no source). [Hz]
LEG_RATE_CUTOFF_HZ = 10.0


def column(frame: pd.DataFrame, name: str) -> np.ndarray | None:
    """Return a column as float64 (missing values as NaN), or None when absent.

    Parameters
    ----------
    frame : DataFrame
        Analysis frame.
    name : str
        Canonical column name from :mod:`analysis.catalogue`.
    """
    if name not in frame.columns:
        return None
    return frame[name].to_numpy(dtype=float, na_value=np.nan)


def derivative(t: np.ndarray, x: np.ndarray, gaps: np.ndarray | None = None) -> np.ndarray:
    """Time derivative on an uneven grid that never differences across a gap or a NaN.

    Parameters
    ----------
    t : ndarray
        Sample times, increasing. [s]
    x : ndarray
        Signal, any unit; NaN for missing samples. [unit]
    gaps : ndarray of bool, optional
        ``gaps[i]`` True when the interval ``t[i]..t[i+1]`` is a data gap;
        by default :func:`analysis.events.data_gaps` of ``t``.

    Returns
    -------
    ndarray
        ``dx/dt`` at each sample; NaN where neither neighbour is usable. [unit/s]

    Notes
    -----
    Inside a clean stretch this is the second-order central difference on an
    uneven grid, the same as ``numpy.gradient(x, t)`` ([3]; written as a
    weighted mean of the backward and forward differences):

        dx/dt_i = (h_i * b_i + h_(i-1) * f_i) / (h_(i-1) + h_i)

    with ``h_i = t_(i+1) - t_i``, ``f_i = (x_(i+1) - x_i) / h_i`` and
    ``b_i = f_(i-1)``. Where one side is a gap or NaN, the one-sided difference
    of the other side is used (first order, as numpy.gradient at the ends).
    """
    t = np.asarray(t, dtype=float)
    x = np.asarray(x, dtype=float)
    n = t.size
    out = np.full(n, np.nan)
    if n < 2:
        return out
    if gaps is None:
        gaps = data_gaps(t)
    h = np.diff(t)
    with np.errstate(invalid="ignore", divide="ignore"):
        f = np.diff(x) / h
    ok = np.isfinite(f) & ~gaps & (h > 0)
    f = np.where(ok, f, np.nan)
    fwd = np.concatenate((f, [np.nan]))  # difference to the right of sample i
    bwd = np.concatenate(([np.nan], f))  # difference to the left of sample i
    h_fwd = np.concatenate((h, [np.nan]))
    h_bwd = np.concatenate(([np.nan], h))
    both = np.isfinite(fwd) & np.isfinite(bwd)
    with np.errstate(invalid="ignore"):
        central = (h_fwd * bwd + h_bwd * fwd) / (h_bwd + h_fwd)  # [3], uneven grid
    out = np.where(both, central, np.where(np.isfinite(fwd), fwd, bwd))
    out[~np.isfinite(x)] = np.nan
    return out


def sample_weights(t: np.ndarray, gaps: np.ndarray | None = None) -> np.ndarray:
    """Time each sample stands for: the interval to the next sample, zero across a gap.

    Parameters
    ----------
    t : ndarray
        Sample times, increasing. [s]
    gaps : ndarray of bool, optional
        Data-gap flags per interval (see :func:`derivative`).

    Returns
    -------
    ndarray
        Weight of each sample (zero-order hold); the last sample weighs 0. [s]
    """
    t = np.asarray(t, dtype=float)
    if t.size < 2:
        return np.zeros(t.size)
    if gaps is None:
        gaps = data_gaps(t)
    h = np.where(gaps, 0.0, np.diff(t))
    return np.concatenate((h, [0.0]))


def time_share(t: np.ndarray, mask: np.ndarray, valid: np.ndarray | None = None) -> float | None:
    """Time-weighted share of the valid time during which ``mask`` holds.

    Parameters
    ----------
    t : ndarray
        Sample times, increasing. [s]
    mask : ndarray of bool
        Condition per sample.
    valid : ndarray of bool, optional
        Samples where the condition could be evaluated (default: all).

    Returns
    -------
    float or None
        Share in 0..1 [-]; None when no valid time was logged.
    """
    w = sample_weights(t)
    if valid is not None:
        w = w * np.asarray(valid, dtype=bool)
    total = float(w.sum())
    if total <= 0:
        return None
    return float((w * np.asarray(mask, dtype=bool)).sum() / total)


def rim_speed(
    wheel_rate: np.ndarray, pitch_rate: np.ndarray | None, wheel_radius: float
) -> np.ndarray:
    """Forward speed of a wheel's rim relative to its axle, in the ground frame.

    Parameters
    ----------
    wheel_rate : ndarray
        Wheel joint rate, positive rolling forward. [rad/s]
    pitch_rate : ndarray or None
        Body pitch rate, positive nose going down; give it when the encoder
        measures the wheel against its leg, None when against the ground. [rad/s]
    wheel_radius : float
        Rolling radius r. [m]

    Returns
    -------
    ndarray
        ``v_rim = r (w_joint + pitch_rate)``, or ``r w_joint``. [m/s]
    """
    w = np.asarray(wheel_rate, dtype=float)
    if pitch_rate is not None:
        w = w + np.asarray(pitch_rate, dtype=float)
    return wheel_radius * w


def lever_arm_rate(
    t: np.ndarray,
    leg_length: np.ndarray,
    pitch: np.ndarray,
    pitch_rate: np.ndarray | None,
    cutoff_hz: float = LEG_RATE_CUTOFF_HZ,
) -> np.ndarray:
    """Forward speed of the base relative to the axle from pitching, ``d/dt(L sin(pitch))``.

    Parameters
    ----------
    t : ndarray
        Sample times, increasing. [s]
    leg_length : ndarray
        Mean axle-to-base distance L. [m]
    pitch : ndarray
        Pitch (attitude estimate), positive nose down. [rad]
    pitch_rate : ndarray or None
        Gyro pitch rate q, positive nose going down; None when not logged. [rad/s]
    cutoff_hz : float
        Cut-off of the zero-phase low-pass applied before any numerical
        derivative. [Hz]

    Returns
    -------
    ndarray
        ``d/dt(L sin(pitch))``. [m/s]

    Notes
    -----
    Product and chain rule: ``d/dt(L sin θ) = L' sin θ + L cos θ · q``. The pitch
    rate q is the gyro's, measured: an attitude *estimate* carries 0.05 to 0.2
    deg of noise and steps, and its numerical derivative times a 0.3 m lever is
    0.1 to 0.5 m/s of noise at 400 Hz, the size of a slip. Only the leg rate L'
    has no measured counterpart: it is the derivative of the leg length after a
    zero-phase low-pass at ``cutoff_hz`` (:func:`analysis.metrics.lowpass_zero_phase`).
    Without a gyro pitch rate the whole term falls back to the derivative of the
    low-passed ``L sin θ``, the weaker estimate.
    """
    L = np.asarray(leg_length, dtype=float)
    theta = np.asarray(pitch, dtype=float)
    if pitch_rate is None:
        return derivative(t, lowpass_zero_phase(t, L * np.sin(theta), cutoff_hz))
    q = np.asarray(pitch_rate, dtype=float)
    dL = derivative(t, lowpass_zero_phase(t, L, cutoff_hz))
    return dL * np.sin(theta) + L * np.cos(theta) * q  # product rule, q measured


def contact_midpoint_speed(
    t: np.ndarray,
    vel_x: np.ndarray,
    yaw_rate: np.ndarray,
    wheel_radius: float,
    leg_length: np.ndarray | None = None,
    pitch: np.ndarray | None = None,
    roll: np.ndarray | None = None,
    pitch_rate: np.ndarray | None = None,
) -> np.ndarray:
    """Forward speed of the midpoint between the wheel contacts, from the base velocity.

    Parameters
    ----------
    t : ndarray
        Sample times, increasing. [s]
    vel_x : ndarray
        Estimated base forward velocity, heading frame. [m/s]
    yaw_rate : ndarray
        Yaw rate, positive turning left. [rad/s]
    wheel_radius : float
        Wheel radius r. [m]
    leg_length : ndarray, optional
        Mean axle-to-base distance L; without it no lever arm is applied. [m]
    pitch : ndarray, optional
        Pitch, positive nose down; without it the pitch term is dropped. [rad]
    roll : ndarray, optional
        Roll, positive right side down; without it the roll term is dropped. [rad]
    pitch_rate : ndarray, optional
        Gyro pitch rate, positive nose going down; gives the pitch term from a
        measured rate (see :func:`lever_arm_rate`). [rad/s]

    Returns
    -------
    ndarray
        ``v_mid``. [m/s]

    Notes
    -----
    Rigid-body relative velocity [2], ``v_mid = v_base - omega x r`` with r
    from the contact midpoint to the base. Pitch pivots the leg about the axle
    (base ``L sin(pitch)`` ahead of it); roll tilts the robot about the contact
    line (base ``(r + L) sin(roll)`` to the right), so the forward component is

        v_mid = v_base_x - d/dt(L sin(pitch)) - yaw_rate (r + L) sin(roll)

    with ``d/dt(L sin(pitch))`` from the gyro pitch rate (:func:`lever_arm_rate`).
    """
    v = np.asarray(vel_x, dtype=float)
    if leg_length is None:
        return v.copy()
    L = np.asarray(leg_length, dtype=float)
    if pitch is not None:
        v = v - lever_arm_rate(t, L, np.asarray(pitch, dtype=float), pitch_rate)  # [2]
    if roll is not None:
        r = wheel_radius
        v = v - np.asarray(yaw_rate, dtype=float) * (r + L) * np.sin(np.asarray(roll, dtype=float))
    return v


def contact_speeds(
    v_mid: np.ndarray, yaw_rate: np.ndarray, track_width: float
) -> tuple[np.ndarray, np.ndarray]:
    """Ground speeds of the left and right wheel contacts (differential drive).

    Parameters
    ----------
    v_mid : ndarray
        Forward speed of the contact midpoint. [m/s]
    yaw_rate : ndarray
        Yaw rate, positive turning left. [rad/s]
    track_width : float
        Distance b between the wheel contacts. [m]

    Returns
    -------
    (ndarray, ndarray)
        ``v_l = v_mid - yaw_rate b / 2`` and ``v_r = v_mid + yaw_rate b / 2``. [m/s]

    Notes
    -----
    Differential-drive kinematics, [1] Ch. 3 (forward kinematics of a differential-drive robot).
    """
    v = np.asarray(v_mid, dtype=float)
    half = np.asarray(yaw_rate, dtype=float) * track_width / 2.0
    return v - half, v + half  # [1] Ch. 3


def yaw_rate_from_wheels(
    rate_l: np.ndarray, rate_r: np.ndarray, wheel_radius: float, track_width: float
) -> np.ndarray:
    """Yaw rate implied by the two wheel rates (differential drive, no slip).

    Parameters
    ----------
    rate_l, rate_r : ndarray
        Ground-referenced wheel rates, positive rolling forward. [rad/s]
    wheel_radius : float
        Wheel radius r. [m]
    track_width : float
        Distance b between the wheel contacts. [m]

    Returns
    -------
    ndarray
        ``r (w_R - w_L) / b``, positive turning left. [rad/s]

    Notes
    -----
    [1] Ch. 3: the robot turns at ``(v_R - v_L) / b`` with ``v = r w``.
    """
    w_l = np.asarray(rate_l, dtype=float)
    w_r = np.asarray(rate_r, dtype=float)
    return wheel_radius * (w_r - w_l) / track_width  # [1] Ch. 3
