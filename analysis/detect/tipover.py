"""Lateral tip-over margin from the zero-moment point (ZMP) of a point-mass model.

The two wheel contacts span a support line of width ``b`` (the track). The
detector takes the specific force of the centre of mass (CoM) in the heading
frame (yaw-only frame: x forward along the heading, y left, z up, ISO 8855),
the CoM height model of the profile and the roll angle, and computes the
lateral ZMP and the margin ``m = 1 - |y_zmp| / (b/2)``: 1 with the ZMP on the
centre line, 0 when the inner wheel unloads, negative beyond.

Sign conventions (ISO 8855): roll ``phi`` positive right side down, pitch
``theta`` positive nose down, y left. The body orientation is roll then pitch
then yaw (``R = Rz(psi) Ry(theta) Rx(phi)``, body to world), so a body vector
is brought into the heading frame by ``Ry(theta) Rx(phi)``. Hand check: a body
at rest rolled by ``phi`` reads ``accel_y = +g sin(phi)`` (right side down
tilts the body's left axis upward, toward the upward specific force), and the
rotation turns that back into ``f_y = 0``, ``f_z = g``.

Assumptions, stated in the results: the accelerometer is taken as at the CoM
(the lever-arm terms ``omega_dot x r + omega x (omega x r)`` from the sensor to
the CoM are neglected, which is small when the IMU sits in the body near the
CoM and the roll and pitch rates are moderate); the robot is a point mass (no
angular-momentum term in the ZMP); the CoM lies on the body z axis through the
midpoint of the contacts, at ``L_c`` from the ground.

The heading-frame specific force (:func:`com_specific_force`) is shared with
the roll detector, which keeps the lean formulas ``steady_turn_lean`` and
``centring_lean`` (:mod:`analysis.detect.roll`). The zero-phase low-pass lives in
:mod:`analysis.metrics`.

This is a model estimate for reviewing logs after the fact, not a safety system.

References
----------
.. [1] S. Kajita et al., "Biped walking pattern generation by using preview
   control of zero-moment point," IEEE Int. Conf. on Robotics and Automation,
   2003. doi:10.1109/ROBOT.2003.1241826
.. [2] M. Vukobratović and B. Borovac, "Zero-moment point — thirty five years of
   its life," Int. J. of Humanoid Robotics, vol. 1, no. 1, pp. 157-173, 2004.
   doi:10.1142/S0219843604000083
.. [3] D. Odenthal, T. Bünte and J. Ackermann, "Nonlinear steering and braking
   control for vehicle rollover avoidance," European Control Conference, 1999.
.. [4] NHTSA, "Consumer information; new car assessment program; rollover
   resistance," Federal Register vol. 66, no. 9, pp. 3388-3437, 2001
   (static stability factor SSF = T / (2 H)).
.. [5] ISO 8855:2011, Road vehicles — Vehicle dynamics and road-holding
   ability — Vocabulary.
"""

from __future__ import annotations

import threading
import weakref
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from analysis import catalogue as cat
from analysis.catalogue import G0
from analysis.detect.force_angle import force_angle_margin
from analysis.events import DetectorResult, find_intervals, intervals_to_events
from analysis.metrics import FILTER_ORDER, FilterReport, lowpass_zero_phase, time_where
from analysis.profile import RobotProfile, Thresholds

#: Below this vertical specific force the robot is close to free fall and the ZMP
#: is undefined; those samples get NaN (common practice, no source). [m/s²]
F_Z_MIN = 0.1 * G0

METHOD_ACCEL = "accelerometer"
METHOD_FALLBACK = "fallback vel_x*yaw_rate"


# --- pure formulas -------------------------------------------------------------


def heading_specific_force(
    accel_x: np.ndarray | float,
    accel_y: np.ndarray | float,
    accel_z: np.ndarray | float,
    roll: np.ndarray | float,
    pitch: np.ndarray | float,
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Rotate a body-frame specific force into the heading (yaw-only) frame.

    Parameters
    ----------
    accel_x, accel_y, accel_z : ndarray or float
        Body-frame specific force (x forward, y left, z up; +g on z at rest). [m/s²]
    roll : ndarray or float
        Roll angle, positive right side down. [rad]
    pitch : ndarray or float
        Pitch angle, positive nose down. [rad]

    Returns
    -------
    (f_x, f_y, f_z) : tuple of ndarray
        Specific force in the heading frame: forward, left, up. [m/s²]

    Notes
    -----
    With ``R = Rz(psi) Ry(theta) Rx(phi)`` from body to world ([1], the ZYX
    Euler-angle sequence; axes and signs of [2]), ``f_h = Ry(theta) Rx(phi) f_b``:

    ``f_y' = cos(phi) a_y - sin(phi) a_z``, ``f_z' = sin(phi) a_y + cos(phi) a_z``,
    ``f_x = cos(theta) a_x + sin(theta) f_z'``, ``f_y = f_y'``,
    ``f_z = -sin(theta) a_x + cos(theta) f_z'``.

    At rest rolled by ``phi`` the sensor reads ``(0, g sin(phi), g cos(phi))``
    and the result is ``(0, 0, g)``.

    References
    ----------
    .. [1] J. Diebel, "Representing attitude: Euler angles, unit quaternions, and
       rotation vectors," Stanford University, 2006.
    .. [2] ISO 8855:2011, Road vehicles — Vehicle dynamics and road-holding
       ability — Vocabulary.
    """
    ax, ay, az = (np.asarray(a, dtype=float) for a in (accel_x, accel_y, accel_z))
    phi = np.asarray(roll, dtype=float)
    theta = np.asarray(pitch, dtype=float)
    c_phi, s_phi = np.cos(phi), np.sin(phi)
    c_th, s_th = np.cos(theta), np.sin(theta)
    f_y = c_phi * ay - s_phi * az  # Rx(phi), row 2
    f_z1 = s_phi * ay + c_phi * az  # Rx(phi), row 3
    f_x = c_th * ax + s_th * f_z1  # Ry(theta), row 1
    f_z = -s_th * ax + c_th * f_z1  # Ry(theta), row 3
    return f_x, f_y, f_z


def zmp_lateral(
    L_c: np.ndarray | float,
    roll: np.ndarray | float,
    f_y: np.ndarray | float,
    f_z: np.ndarray | float,
) -> np.ndarray:
    """Lateral zero-moment point of a point mass in the heading frame.

    Parameters
    ----------
    L_c : ndarray or float
        CoM distance from the ground along the body z axis. [m]
    roll : ndarray or float
        Roll angle, positive right side down. [rad]
    f_y : ndarray or float
        Lateral specific force of the CoM in the heading frame, left positive. [m/s²]
    f_z : ndarray or float
        Vertical specific force of the CoM in the heading frame (g + a_z). [m/s²]

    Returns
    -------
    ndarray
        Lateral ZMP from the contact midpoint, left positive; NaN where
        ``f_z < F_Z_MIN`` (no meaningful ground contact). [m]

    Notes
    -----
    ``y_c = -L_c sin(phi)``, ``z_c = L_c cos(phi)`` and
    ``y_zmp = y_c - z_c f_y / f_z`` ([1], the cart-table ZMP equation, here in
    the lateral plane with ``f_z`` in place of g; [2], ZMP definition on flat
    ground).

    References
    ----------
    .. [1] S. Kajita et al., "Biped walking pattern generation by using preview
       control of zero-moment point," IEEE ICRA, 2003.
       doi:10.1109/ROBOT.2003.1241826
    .. [2] M. Vukobratović and B. Borovac, "Zero-moment point — thirty five years
       of its life," Int. J. of Humanoid Robotics, 1(1), 2004.
       doi:10.1142/S0219843604000083
    """
    phi = np.asarray(roll, dtype=float)
    L_c = np.asarray(L_c, dtype=float)
    f_y = np.asarray(f_y, dtype=float)
    f_z = np.asarray(f_z, dtype=float)
    y_c = -L_c * np.sin(phi)
    z_c = L_c * np.cos(phi)
    with np.errstate(invalid="ignore", divide="ignore"):
        y_zmp = y_c - z_c * f_y / f_z  # [1] cart-table ZMP, point mass
        return np.where(f_z >= F_Z_MIN, y_zmp, np.nan)


def tip_margin(y_zmp: np.ndarray | float, track_width: float) -> np.ndarray:
    """Lateral tip-over margin from the ZMP position.

    Parameters
    ----------
    y_zmp : ndarray or float
        Lateral ZMP from the contact midpoint. [m]
    track_width : float
        Distance between the two wheel contacts. [m]

    Returns
    -------
    ndarray
        ``1`` centred, ``0`` at a wheel contact (inner wheel unloads),
        negative beyond. [-]

    Notes
    -----
    ``m = 1 - |y_zmp| / (b / 2)``, which equals ``1 - |LTR|`` with the load
    transfer ratio of [1] (see :func:`load_transfer_ratio`).

    References
    ----------
    .. [1] D. Odenthal, T. Bünte and J. Ackermann, "Nonlinear steering and
       braking control for vehicle rollover avoidance," ECC, 1999.
    """
    return 1.0 - np.abs(np.asarray(y_zmp, dtype=float)) / (0.5 * track_width)


def load_transfer_ratio(F_left: np.ndarray | float, F_right: np.ndarray | float) -> np.ndarray:
    """Load transfer ratio of the two wheel contacts.

    Parameters
    ----------
    F_left, F_right : ndarray or float
        Normal contact force on the left and right wheel. [N]

    Returns
    -------
    ndarray
        ``(F_right - F_left) / (F_right + F_left)``: 0 balanced, +1 the left
        wheel unloaded, -1 the right wheel unloaded. [-]

    Notes
    -----
    ``LTR = (F_R - F_L) / (F_R + F_L)`` ([1], definition of the load transfer ratio).

    References
    ----------
    .. [1] D. Odenthal, T. Bünte and J. Ackermann, "Nonlinear steering and
       braking control for vehicle rollover avoidance," European Control
       Conference, 1999.
    """
    F_l = np.asarray(F_left, dtype=float)
    F_r = np.asarray(F_right, dtype=float)
    return (F_r - F_l) / (F_r + F_l)  # [1] LTR definition


def static_stability_factor(track_width: float, L_c: np.ndarray | float) -> np.ndarray:
    """Static stability factor: lateral acceleration (in g) that tips an upright body.

    Parameters
    ----------
    track_width : float
        Distance between the two wheel contacts. [m]
    L_c : ndarray or float
        CoM height. [m]

    Returns
    -------
    ndarray
        ``SSF = b / (2 L_c)``. [-]

    Notes
    -----
    ``SSF = T / (2 H)`` with T the track width and H the CoM height ([1]).

    References
    ----------
    .. [1] NHTSA, "Consumer information; new car assessment program; rollover
       resistance," Federal Register 66(9), 3388-3437, 2001.
    """
    return track_width / (2.0 * np.asarray(L_c, dtype=float))  # [1]


# --- the CoM specific force from a log ------------------------------------------------


@dataclass
class SpecificForce:
    """Heading-frame specific force of the CoM, as used by the tip and roll detectors."""

    f_y: np.ndarray
    f_z: np.ndarray
    method: str
    notes: list[str] = field(default_factory=list)


def _col(frame: pd.DataFrame, name: str) -> np.ndarray | None:
    if name not in frame.columns:
        return None
    values = frame[name].to_numpy(dtype=float)
    return values if np.isfinite(values).any() else None


#: The last frame's specific force: the tip and roll detectors both need it, and one
#: analysis runs them on the same frame (a weak reference: the frame is never kept).
_last_force: tuple[weakref.ref[pd.DataFrame], float, SpecificForce | str] | None = None
_last_force_lock = threading.Lock()


def com_specific_force(frame: pd.DataFrame, thresholds: Thresholds) -> SpecificForce | str:
    """:func:`compute_com_specific_force`, computed once per frame and cutoff.

    The detectors never change the frame they are given, so the same frame
    object with the same ``accel_cutoff`` has the same specific force. The
    result's arrays are shared: callers must not change them in place.
    """
    global _last_force
    cutoff = float(thresholds.accel_cutoff)
    with _last_force_lock:
        last = _last_force
    if last is not None and last[0]() is frame and last[1] == cutoff:
        return last[2]
    force = compute_com_specific_force(frame, thresholds)
    with _last_force_lock:
        _last_force = (weakref.ref(frame), cutoff, force)
    return force


def compute_com_specific_force(frame: pd.DataFrame, thresholds: Thresholds) -> SpecificForce | str:
    """Heading-frame specific force of the CoM from the log, or why it cannot be had.

    Parameters
    ----------
    frame : DataFrame
        Analysis frame with ``t`` and catalogue columns.
    thresholds : Thresholds
        Uses ``accel_cutoff``. [Hz]

    Returns
    -------
    SpecificForce or str
        The low-passed ``f_y``, ``f_z`` [m/s²] with the method and notes, or a
        reason naming the missing signals.

    Notes
    -----
    With ``accel_y`` and ``accel_z`` logged: rotate by roll and pitch
    (:func:`heading_specific_force`), then low-pass (:func:`lowpass_zero_phase`).
    Otherwise the fallback ``f_y = vel_x * yaw_rate`` (centripetal acceleration
    of a steady turn, positive to the left when turning left) and ``f_z = G0``.
    """
    t = frame[cat.T].to_numpy(dtype=float)
    notes: list[str] = []
    ay, az = _col(frame, cat.ACCEL_Y), _col(frame, cat.ACCEL_Z)
    roll = _col(frame, cat.ROLL)
    rep = FilterReport()
    if ay is not None and az is not None and roll is not None:
        ax = _col(frame, cat.ACCEL_X)
        pitch = _col(frame, cat.PITCH)
        if pitch is None:
            pitch = np.zeros(t.size)
            notes.append(f"No {cat.PITCH} logged: the accelerometer is rotated by roll only.")
        if ax is None:
            ax = np.zeros(t.size)
            notes.append(f"No {cat.ACCEL_X} logged: taken as 0 in the pitch rotation.")
        _, f_y, f_z = heading_specific_force(ax, ay, az, roll, pitch)
        method = METHOD_ACCEL
        notes.append(
            "Specific force from the accelerometer rotated into the heading frame, taken as "
            "at the CoM (lever arm from the sensor to the CoM neglected)."
        )
    else:
        vx, wz = _col(frame, cat.VEL_X), _col(frame, cat.YAW_RATE)
        if vx is None or wz is None:
            missing = [
                n for n, v in ((cat.ACCEL_Y, ay), (cat.ACCEL_Z, az), (cat.ROLL, roll)) if v is None
            ]
            missing_fb = [n for n, v in ((cat.VEL_X, vx), (cat.YAW_RATE, wz)) if v is None]
            return (
                f"No CoM specific force: the accelerometer method needs {', '.join(missing)} "
                f"and the fallback needs {', '.join(missing_fb)}. Map the IMU's lateral and "
                f"vertical accelerometer and roll channels (or the base velocity estimate and "
                f"the gyro yaw rate) in the channel map."
            )
        f_y = vx * wz
        f_z = np.full(t.size, G0)
        method = METHOD_FALLBACK
        notes.append(
            f"No accelerometer ({cat.ACCEL_Y}, {cat.ACCEL_Z}) with {cat.ROLL}: lateral specific "
            f"force from the fallback f_y = {cat.VEL_X} * {cat.YAW_RATE} (steady-turn "
            f"centripetal acceleration), f_z = g0; transients and slopes are not seen."
        )
    cutoff = float(thresholds.accel_cutoff)
    f_y = lowpass_zero_phase(t, f_y, cutoff, report=rep)
    if method == METHOD_ACCEL:
        f_z = lowpass_zero_phase(t, f_z, cutoff, report=FilterReport())
    if cutoff <= 0:
        notes.append("accel_cutoff is 0: the specific force is not low-passed.")
    else:
        notes.append(
            f"Low-passed with a zero-phase Butterworth filter (order {FILTER_ORDER} each way, "
            f"cut-off {cutoff:g} Hz, {rep.segments} gap-free stretch(es))."
        )
    if rep.short_segments:
        notes.append(
            f"{rep.short_segments} stretch(es) shorter than the filter padding were filtered "
            f"with reduced padding; their edges are less reliable."
        )
    if rep.unfiltered_segments:
        notes.append(
            f"{rep.unfiltered_segments} stretch(es) were left unfiltered (one sample, or the "
            f"sample rate is too low for a {cutoff:g} Hz cut-off)."
        )
    return SpecificForce(f_y=f_y, f_z=f_z, method=method, notes=notes)


def com_height_series(frame: pd.DataFrame, profile: RobotProfile) -> np.ndarray | str:
    """CoM height ``L_c`` per sample from the profile's model, or why it cannot be had. [m]"""
    n = len(frame)
    if profile.com.model == "constant":
        return np.asarray(profile.com.com_height(np.zeros(n), profile.wheel_radius), dtype=float)
    legs = [
        v for v in (_col(frame, cat.LEG_L_LENGTH), _col(frame, cat.LEG_R_LENGTH)) if v is not None
    ]
    if not legs:
        return (
            f"The profile's linear CoM model needs {cat.LEG_L_LENGTH} or {cat.LEG_R_LENGTH}; "
            f"neither is logged. Map the leg length channels, or give a constant CoM height "
            f'in the profile ([com] model = "constant").'
        )
    stack = np.vstack(legs)
    count = np.isfinite(stack).sum(axis=0)
    mean_leg = np.where(count > 0, np.nansum(stack, axis=0) / np.maximum(count, 1), np.nan)
    return np.asarray(profile.com.com_height(mean_leg, profile.wheel_radius), dtype=float)


# --- the detector ------------------------------------------------------------------


def detect_tip_margin(
    frame: pd.DataFrame, profile: RobotProfile, thresholds: Thresholds | None = None
) -> DetectorResult:
    """Lateral tip-over margin: series, low-margin events and KPIs.

    Parameters
    ----------
    frame : DataFrame
        Column ``t`` [s] and catalogue columns (``roll``, ``pitch``, ``accel_*``,
        ``vel_x``, ``yaw_rate``, leg lengths); any may be missing or NaN.
    profile : RobotProfile
        Track width, wheel radius and CoM model.
    thresholds : Thresholds, optional
        Defaults to ``profile.thresholds``; uses ``tip_margin_on``/``_off``,
        ``accel_cutoff``, ``min_duration_s``, ``merge_gap_s``.

    Returns
    -------
    DetectorResult
        ``detector="tip"``; series ``specific_force_y``, ``specific_force_z``,
        ``com_height``, ``zmp_y``, ``tip_margin``, ``static_stability_factor``;
        events ``low_tip_margin`` (channel None) with ``peak`` the minimum
        margin and ``detail["side"]`` the side the ZMP moved toward ("left" or
        "right": the loaded, outer wheel, toward which the robot would tip;
        ``detail["unloading_wheel"]`` is the other; both None when no sample of
        the event has a defined ZMP). Samples near free fall (``f_z < F_Z_MIN``)
        have no ZMP and a margin of 0 (``detail["unsupported"]``, KPI
        ``unsupported_s``).

    Notes
    -----
    See the module docstring for the model and [1]-[4] there.
    """
    th = thresholds if thresholds is not None else profile.thresholds
    result = DetectorResult(detector="tip")
    roll = _col(frame, cat.ROLL)
    if roll is None:
        result.skipped = (
            f"No {cat.ROLL} logged: the tip-over margin needs the body roll angle. Map the "
            f"IMU roll channel to {cat.ROLL} in the channel map."
        )
        return result
    force = com_specific_force(frame, th)
    if isinstance(force, str):
        result.skipped = force
        return result
    L_c = com_height_series(frame, profile)
    if isinstance(L_c, str):
        result.skipped = L_c
        return result
    t = frame[cat.T].to_numpy(dtype=float)
    b = profile.track_width
    y_zmp = zmp_lateral(L_c, roll, force.f_y, force.f_z)
    margin = tip_margin(y_zmp, b)
    # Near free fall neither wheel carries load: the ZMP is undefined, and the margin
    # is at most 0 (the inner wheel has certainly unloaded); it is reported as 0.
    unsupported = (force.f_z < F_Z_MIN) & np.isfinite(roll) & np.isfinite(L_c)
    margin = np.where(unsupported, 0.0, margin)
    ssf = static_stability_factor(b, L_c)
    angle = force_angle_margin(L_c, roll, force.f_y, force.f_z, b)
    result.notes = list(force.notes)
    result.series = pd.DataFrame(
        {
            cat.T: t,
            cat.SPECIFIC_FORCE_Y: force.f_y,
            cat.SPECIFIC_FORCE_Z: force.f_z,
            cat.COM_HEIGHT: L_c,
            cat.ZMP_Y: y_zmp,
            cat.TIP_MARGIN: margin,
            cat.STATIC_STABILITY_FACTOR: ssf,
            cat.FORCE_ANGLE: angle,
        }
    )
    unsupported_s, _ = time_where(t, unsupported, np.isfinite(margin))
    if unsupported.any():
        result.notes.append(
            f"{int(unsupported.sum())} sample(s) with vertical specific force below "
            f"{F_Z_MIN:.2f} m/s² (near free fall, no wheel loaded): the ZMP is undefined "
            f"there and the margin is reported as 0."
        )
    valid = np.isfinite(margin)
    if not valid.any():
        result.notes.append("No sample has roll, specific force and CoM height together.")
        result.kpis = {"method": force.method, "min_margin": None}
        return result

    tv, mv, yv = t[valid], margin[valid], y_zmp[valid]
    intervals = find_intervals(
        tv,
        mv,
        th.tip_margin_on,
        th.tip_margin_off,
        min_duration_s=th.min_duration_s,
        merge_gap_s=th.merge_gap_s,
        above=False,
    )
    detail = {
        "signal": cat.TIP_MARGIN,
        "unit": "",
        "threshold_on": th.tip_margin_on,
        "threshold_off": th.tip_margin_off,
        "method": force.method,
    }
    events = intervals_to_events(
        tv, mv, intervals, cat.LOW_TIP_MARGIN, None, peak="min", detail=detail
    )
    for event, (a, bi) in zip(events, intervals, strict=True):  # loop over events
        k = _argmin_supported(mv[a : bi + 1], yv[a : bi + 1])
        side = None if k is None else _side(yv[a + k])
        event.detail["side"] = side
        event.detail["unloading_wheel"] = {"left": "right", "right": "left"}.get(side or "")
        event.detail["zmp_y_m"] = None if k is None else float(yv[a + k])
        event.detail["unsupported"] = bool(unsupported[valid][a : bi + 1].any())
    result.events = events

    below_s, below_share = time_where(t, margin < th.tip_margin_on, valid)
    k_min = int(np.argmin(mv))
    k_side = _argmin_supported(mv, yv)
    result.kpis = {
        "min_margin": float(mv[k_min]),
        "min_margin_t_s": float(tv[k_min]),
        "p1_margin": float(np.percentile(mv, 1.0)),
        "time_below_s": below_s,
        "share_below": below_share,
        "side_of_min": None if k_side is None else _side(yv[k_side]),
        "unsupported_s": unsupported_s,
        "event_count": len(events),
        "min_static_stability_factor": float(np.nanmin(ssf)) if np.isfinite(ssf).any() else None,
        "min_force_angle": float(np.nanmin(angle)) if np.isfinite(angle).any() else None,
        "method": force.method,
        "accel_cutoff_hz": float(th.accel_cutoff),
    }
    return result


def _argmin_supported(margin: np.ndarray, y_zmp: np.ndarray) -> int | None:
    """Index of the lowest margin among samples with a defined ZMP, or None."""
    ok = np.isfinite(y_zmp)
    if not ok.any():
        return None
    return int(np.argmin(np.where(ok, margin, np.inf)))


#: A ZMP closer to the centre line than this has no side (0.1 mm; common practice, no source).
SIDE_DEADBAND_M = 1e-4


def _side(y_zmp: float) -> str | None:
    """Side the ZMP moved toward: the loaded (outer) wheel, toward which the robot would tip.

    None when the ZMP is on the centre line (within :data:`SIDE_DEADBAND_M`).
    """
    if not abs(y_zmp) > SIDE_DEADBAND_M:
        return None
    return "left" if y_zmp > 0 else "right"
