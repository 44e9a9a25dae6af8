"""Calibration check: is the robot profile right for this run's logs?

Every detector leans on a few profile numbers (wheel radius, track width) and on
sensors being zeroed (gyro bias, accelerometer mounting). A wrong wheel radius
turns into false slip everywhere, a wrong track width into false yaw slip in
every curve. This check estimates them from the run itself:

- **effective wheel radius** from straight, steady stretches: least squares of the
  velocity estimate against the wheels' mean ground rate, ``v = r w``;
- **effective track width** from turning stretches: least squares of the wheels'
  rim-speed difference against the gyro yaw rate, ``r (w_R - w_L) = b yaw_rate``
  (differential-drive kinematics, Siegwart, Nourbakhsh & Scaramuzza, *Introduction
  to Autonomous Mobile Robots*, 2nd ed., MIT Press, 2011, Ch. 3);
- **gyro bias** at standstill: the mean of each rate while the robot stands;
- **accelerometer tilt** at standstill: the attitude the accelerometer gives
  (gravity's direction in the body frame) against the attitude estimate.

Each estimate comes with the number of samples it rests on and is compared with
the profile against a stated tolerance. Stretches are chosen without looking at the
detectors' results, so a check of the profile never depends on the profile.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd

from analysis import catalogue as cat
from analysis.kinematics import column
from analysis.profile import RobotProfile

G0 = 9.80665  # m/s², standard gravity, ISO 80000-3

#: Relative difference of wheel radius from the profile that is reported. [-]
#: Common practice, no source: tyre wear and pressure move the rolling radius by
#: about 1 %; 2 % is beyond that and worth a look.
RADIUS_TOLERANCE = 0.02
#: Relative difference of track width that is reported. [-] The effective track
#: of wide tyres moves with load and lean by a few percent (common practice, no source).
TRACK_TOLERANCE = 0.05
#: Gyro bias that is reported. [rad/s] 0.5 deg/s: well above a zeroed MEMS gyro's
#: residual bias (a few hundredths of a deg/s), from memory.
GYRO_BIAS_TOLERANCE = np.deg2rad(0.5)
#: Accelerometer / attitude disagreement at rest that is reported. [rad] 1 deg:
#: from memory, a typical mounting tolerance of an IMU board.
TILT_TOLERANCE = np.deg2rad(1.0)

#: Straight stretch: |yaw rate| below this. [rad/s]
STRAIGHT_YAW_RATE = 0.05
#: Turning stretch: |yaw rate| above this. [rad/s]
TURN_YAW_RATE = 0.25
#: Moving: |speed| above this for the radius fit. [m/s]
MOVING_SPEED = 0.3
#: Standstill: |speed| and each wheel's |rim speed| below this. [m/s]
STILL_SPEED = 0.02
#: Steady: |pitch rate| below this (the lever-arm term stays small). [rad/s]
STEADY_PITCH_RATE = 0.2
#: Fewest samples an estimate may rest on. [-]
MIN_SAMPLES = 50
#: Share of the largest residuals dropped before the final fit (robust to slip). [-]
TRIM = 0.05


@dataclass
class Estimate:
    """One calibration estimate against the profile's value (SI units)."""

    key: str
    label: str
    unit: str
    estimate: float | None
    profile: float | None
    samples: int
    tolerance: float
    tolerance_kind: str  # "relative" or "absolute"
    note: str = ""

    @property
    def differs(self) -> bool | None:
        """True when the estimate differs from the profile by more than the tolerance."""
        if self.estimate is None:
            return None
        ref = 0.0 if self.profile is None else self.profile
        diff = abs(self.estimate - ref)
        if self.tolerance_kind == "relative":
            return bool(ref != 0 and diff / abs(ref) > self.tolerance)
        return bool(diff > self.tolerance)

    def to_dict(self) -> dict[str, Any]:
        return {
            "key": self.key,
            "label": self.label,
            "unit": self.unit,
            "estimate": self.estimate,
            "profile": self.profile,
            "samples": self.samples,
            "tolerance": self.tolerance,
            "tolerance_kind": self.tolerance_kind,
            "differs": self.differs,
            "note": self.note,
        }


@dataclass
class Calibration:
    """All estimates of one run, and the profile values they suggest."""

    estimates: list[Estimate] = field(default_factory=list)

    def corrected_profile(self) -> dict[str, float]:
        """Profile keys (``[robot]`` table, SI) whose estimate differs, with the value to use."""
        keys = {"wheel_radius": "wheel_radius_m", "track_width": "track_width_m"}
        return {
            keys[e.key]: float(e.estimate)  # type: ignore[arg-type]
            for e in self.estimates
            if e.key in keys and e.differs
        }

    def to_dict(self) -> dict[str, Any]:
        return {
            "estimates": [e.to_dict() for e in self.estimates],
            "corrected_profile": self.corrected_profile(),
        }


def _fit_through_origin(x: np.ndarray, y: np.ndarray) -> tuple[float | None, int]:
    """Least-squares slope k of ``y = k x``, refitted without the largest residuals.

    Ordinary least squares through the origin, ``k = sum(x y) / sum(x^2)``; then the
    ``TRIM`` share of samples with the largest |y - k x| (slip, bumps) is dropped
    and the slope fitted again.
    """
    ok = np.isfinite(x) & np.isfinite(y)
    x, y = x[ok], y[ok]
    if len(x) < MIN_SAMPLES or not np.any(x):
        return None, int(len(x))
    k = float(np.dot(x, y) / np.dot(x, x))
    resid = np.abs(y - k * x)
    keep = resid <= np.quantile(resid, 1 - TRIM)
    if keep.sum() >= MIN_SAMPLES and np.any(x[keep]):
        k = float(np.dot(x[keep], y[keep]) / np.dot(x[keep], x[keep]))
    return k, int(len(x))


def calibrate(frame: pd.DataFrame, profile: RobotProfile) -> Calibration:
    """Estimate wheel radius, track width, gyro bias and accelerometer tilt from a run.

    Parameters
    ----------
    frame : DataFrame
        The run's frame (catalogue names, SI units, column ``t``).
    profile : RobotProfile
        The profile to check (wheel radius, track width, encoder reference).

    Returns
    -------
    Calibration
        One :class:`Estimate` per quantity that the logged signals allow; an
        estimate is None (with a note) when too few samples qualify.
    """
    out = Calibration()
    t = frame[cat.T].to_numpy(dtype=float)
    n = len(t)
    nan = np.full(n, np.nan)
    yaw_rate = column(frame, cat.YAW_RATE)
    pitch_rate = column(frame, cat.PITCH_RATE)
    roll_rate = column(frame, cat.ROLL_RATE)
    vel_x = column(frame, cat.VEL_X)
    wheels = profile.wheels()
    w_l = column(frame, cat.actuator_signal(wheels["l"].name, cat.VEL)) if "l" in wheels else None
    w_r = column(frame, cat.actuator_signal(wheels["r"].name, cat.VEL)) if "r" in wheels else None
    relative = profile.wheel_encoder_reference != "ground"
    q = pitch_rate if pitch_rate is not None else np.zeros(n)
    ground_l = None if w_l is None else (w_l + q if relative else w_l)
    ground_r = None if w_r is None else (w_r + q if relative else w_r)

    # Wheel radius: v = r * mean ground rate, on straight, steady, moving stretches.
    r_est: float | None = None
    if vel_x is not None and ground_l is not None and ground_r is not None and yaw_rate is not None:
        w_mid = 0.5 * (ground_l + ground_r)
        steady = np.abs(q) < STEADY_PITCH_RATE
        use = (np.abs(yaw_rate) < STRAIGHT_YAW_RATE) & (np.abs(vel_x) > MOVING_SPEED) & steady
        r_est, samples = _fit_through_origin(w_mid[use], vel_x[use])
        out.estimates.append(
            Estimate(
                "wheel_radius",
                "Effective wheel radius",
                "m",
                r_est,
                profile.wheel_radius,
                samples,
                RADIUS_TOLERANCE,
                "relative",
                "" if r_est is not None else "too few straight, steady samples above 0.3 m/s",
            )
        )

    # Track width: r (w_R - w_L) = b * yaw_rate, on turning stretches.
    if ground_l is not None and ground_r is not None and yaw_rate is not None:
        r_use = r_est if r_est is not None else profile.wheel_radius
        diff = r_use * (ground_r - ground_l)
        use = np.abs(yaw_rate) > TURN_YAW_RATE
        b_est, samples = _fit_through_origin(yaw_rate[use], diff[use])
        out.estimates.append(
            Estimate(
                "track_width",
                "Effective track width",
                "m",
                b_est,
                profile.track_width,
                samples,
                TRACK_TOLERANCE,
                "relative",
                (
                    "with the estimated wheel radius"
                    if r_est is not None
                    else "with the profile's wheel radius"
                )
                if b_est is not None
                else "too few turning samples (|yaw rate| above 0.25 rad/s)",
            )
        )

    # Standstill: no speed, wheels still.
    still = np.ones(n, dtype=bool)
    if vel_x is not None:
        still &= np.abs(vel_x) < STILL_SPEED
    for g in (ground_l, ground_r):
        if g is not None:
            still &= np.abs(g * profile.wheel_radius) < STILL_SPEED
    if vel_x is None and ground_l is None:
        still[:] = False
    for key, label, rate in (
        ("gyro_bias_roll", "Gyro bias, roll rate", roll_rate),
        ("gyro_bias_pitch", "Gyro bias, pitch rate", pitch_rate),
        ("gyro_bias_yaw", "Gyro bias, yaw rate", yaw_rate),
    ):
        if rate is None:
            continue
        vals = rate[still]
        vals = vals[np.isfinite(vals)]
        bias = float(np.mean(vals)) if len(vals) >= MIN_SAMPLES else None
        out.estimates.append(
            Estimate(
                key,
                label,
                "rad/s",
                bias,
                0.0,
                len(vals),
                GYRO_BIAS_TOLERANCE,
                "absolute",
                "" if bias is not None else "too little standstill",
            )
        )

    # Accelerometer tilt at rest. Specific force of gravity in the body frame
    # (x forward, y left, z up; pitch positive nose down, roll positive right side
    # down): f_x = -g sin(pitch), f_y = g sin(roll) cos(pitch), f_z = g cos(roll) cos(pitch),
    # so pitch = atan2(-f_x, hypot(f_y, f_z)) and roll = atan2(f_y, f_z)
    # (standard accelerometer tilt sensing, e.g. Freescale AN3461, from memory).
    ax, ay, az = (column(frame, c) for c in (cat.ACCEL_X, cat.ACCEL_Y, cat.ACCEL_Z))
    pitch = column(frame, cat.PITCH)
    roll = column(frame, cat.ROLL)
    if ax is not None and ay is not None and az is not None:
        fx, fy, fz = ax[still], ay[still], az[still]
        pitch_acc = np.arctan2(-fx, np.hypot(fy, fz))
        roll_acc = np.arctan2(fy, fz)
        for key, label, est, acc in (
            ("accel_tilt_pitch", "Attitude minus accelerometer tilt, pitch", pitch, pitch_acc),
            ("accel_tilt_roll", "Attitude minus accelerometer tilt, roll", roll, roll_acc),
        ):
            if est is None:
                continue
            d = (est[still] if est is not None else nan[still]) - acc
            d = d[np.isfinite(d)]
            off = float(np.mean(d)) if len(d) >= MIN_SAMPLES else None
            out.estimates.append(
                Estimate(
                    key,
                    label,
                    "rad",
                    off,
                    0.0,
                    len(d),
                    TILT_TOLERANCE,
                    "absolute",
                    "accelerometer mounting or attitude-estimate offset"
                    if off is not None
                    else "too little standstill",
                )
            )
    return out
