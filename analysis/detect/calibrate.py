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

from collections.abc import Iterable
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
#: Most (x, y) pairs a fit of :func:`calibrate_chunks` holds. [-] 2**22 pairs of two
#: float64 are 64 MiB per fit (two fits: 128 MiB); the fit itself makes a few
#: temporaries of that length (finite mask, residuals, trimmed copies), so its peak
#: stays within a few hundred MiB. (2**22 samples are 5.8 h at 200 Hz.)
MAX_FIT_PAIRS = 1 << 22


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


@dataclass
class _Selection:
    """The samples of one frame (or chunk) that the estimates rest on.

    Every entry is selected sample by sample, so a run cut into consecutive chunks
    selects the same samples, in the same order, as the whole run. An entry is None
    when the signals it needs are not logged.
    """

    #: Finite (mean ground rate, velocity estimate) pairs of the radius fit. [rad/s, m/s]
    radius: tuple[np.ndarray, np.ndarray] | None
    #: Finite (yaw rate, ``ground_r - ground_l``) pairs of the track fit; the second is
    #: multiplied by the wheel radius once that is known. [rad/s, rad/s]
    track: tuple[np.ndarray, np.ndarray] | None
    #: Finite values whose mean is an estimate (gyro rates and attitude minus
    #: accelerometer tilt at standstill), by estimate key, in the order of the
    #: estimates. [rad/s or rad]
    means: dict[str, np.ndarray]

    def layout(self) -> tuple[bool, bool, tuple[str, ...]]:
        """Which estimates the frame's columns allow."""
        return self.radius is not None, self.track is not None, tuple(self.means)


def _finite_pairs(x: np.ndarray, y: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """The pairs of ``x`` and ``y`` where both are finite."""
    ok = np.isfinite(x) & np.isfinite(y)
    return x[ok], y[ok]


def _select(frame: pd.DataFrame, profile: RobotProfile) -> _Selection:
    """Select the samples of the radius and track fits, the standstill and its values.

    Parameters
    ----------
    frame : DataFrame
        The run's frame or one chunk of its rows (catalogue names, SI units, column ``t``).
    profile : RobotProfile
        The profile (wheels, encoder reference, wheel radius for the standstill test).

    Returns
    -------
    _Selection
        The selected finite samples, as new arrays (never views into ``frame``).
    """
    n = len(frame[cat.T])
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
    radius = None
    if vel_x is not None and ground_l is not None and ground_r is not None and yaw_rate is not None:
        w_mid = 0.5 * (ground_l + ground_r)
        steady = np.abs(q) < STEADY_PITCH_RATE
        use = (np.abs(yaw_rate) < STRAIGHT_YAW_RATE) & (np.abs(vel_x) > MOVING_SPEED) & steady
        radius = _finite_pairs(w_mid[use], vel_x[use])

    # Track width: r (w_R - w_L) = b * yaw_rate, on turning stretches.
    track = None
    if ground_l is not None and ground_r is not None and yaw_rate is not None:
        use = np.abs(yaw_rate) > TURN_YAW_RATE
        track = _finite_pairs(yaw_rate[use], (ground_r - ground_l)[use])

    # Standstill: no speed, wheels still.
    still = np.ones(n, dtype=bool)
    if vel_x is not None:
        still &= np.abs(vel_x) < STILL_SPEED
    for g in (ground_l, ground_r):
        if g is not None:
            still &= np.abs(g * profile.wheel_radius) < STILL_SPEED
    if vel_x is None and ground_l is None:
        still[:] = False
    means: dict[str, np.ndarray] = {}
    for key, rate in (
        ("gyro_bias_roll", roll_rate),
        ("gyro_bias_pitch", pitch_rate),
        ("gyro_bias_yaw", yaw_rate),
    ):
        if rate is not None:
            vals = rate[still]
            means[key] = vals[np.isfinite(vals)]

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
        for key, est, acc in (
            ("accel_tilt_pitch", pitch, pitch_acc),
            ("accel_tilt_roll", roll, roll_acc),
        ):
            if est is not None:
                d = est[still] - acc
                means[key] = d[np.isfinite(d)]
    return _Selection(radius, track, means)


def _ordinal(k: int) -> str:
    """English ordinal of a positive integer: 2nd, 4th, 32nd, 512th."""
    if k % 100 in (11, 12, 13):
        return f"{k}th"
    return f"{k}{ {1: 'st', 2: 'nd', 3: 'rd'}.get(k % 10, 'th') }"


class _ThinnedPairs:
    """The (x, y) pairs of a fit, collected chunk by chunk, at most ``max_pairs`` held.

    The pairs held are always selected samples number 0, k, 2k, ... (counted over
    the whole run) with k a power of two: when one more would exceed ``max_pairs``,
    every other pair held is dropped and k doubles.
    """

    def __init__(self, max_pairs: int | None) -> None:
        self.max_pairs = max_pairs
        #: Every ``step``-th selected sample is held. [-]
        self.step = 1
        #: Selected (finite) samples seen so far, held or not. [-]
        self.seen = 0
        self._x: list[np.ndarray] = []
        self._y: list[np.ndarray] = []
        self._held = 0

    def add(self, x: np.ndarray, y: np.ndarray) -> None:
        """Take the next selected pairs (finite, in time order)."""
        m = len(x)
        if self.max_pairs is not None:
            while self._held + len(range((-self.seen) % self.step, m, self.step)) > self.max_pairs:
                self._halve()
        first = (-self.seen) % self.step
        if first < m:
            self._x.append(np.array(x[first :: self.step], dtype=np.float64))
            self._y.append(np.array(y[first :: self.step], dtype=np.float64))
            self._held += len(self._x[-1])
        self.seen += m

    def _halve(self) -> None:
        """Keep rows 0, 2, 4, ... of the pairs held, and from now on every 2k-th sample."""
        x, y = self.pairs()
        self._x, self._y = [x[::2].copy()], [y[::2].copy()]
        self._held = len(self._x[0])
        self.step *= 2

    def pairs(self) -> tuple[np.ndarray, np.ndarray]:
        """The pairs held, concatenated."""
        if not self._x:
            return np.empty(0), np.empty(0)
        return np.concatenate(self._x), np.concatenate(self._y)

    def note(self) -> str:
        """What the fit rests on, when thinned; empty otherwise."""
        if self.step == 1:
            return ""
        return f"fitted on every {_ordinal(self.step)} of {self.seen:,} samples"


def _join(*notes: str) -> str:
    """Notes joined by "; ", empty ones left out."""
    return "; ".join(n for n in notes if n)


class _Accumulator:
    """Pairs, sums and counts of a run's selections, gathered chunk by chunk."""

    def __init__(self, layout: tuple[bool, bool, tuple[str, ...]], max_pairs: int | None) -> None:
        self.layout = layout
        has_radius, has_track, mean_keys = layout
        self.radius = _ThinnedPairs(max_pairs) if has_radius else None
        self.track = _ThinnedPairs(max_pairs) if has_track else None
        self.sums = dict.fromkeys(mean_keys, 0.0)
        self.counts = dict.fromkeys(mean_keys, 0)

    def add(self, sel: _Selection) -> None:
        """Add one chunk's selection (its columns must be the first chunk's)."""
        if sel.layout() != self.layout:
            raise ValueError("all chunks of a run must have the same columns")
        if self.radius is not None and sel.radius is not None:
            self.radius.add(*sel.radius)
        if self.track is not None and sel.track is not None:
            self.track.add(*sel.track)
        for key, vals in sel.means.items():
            self.sums[key] += float(np.sum(vals))
            self.counts[key] += len(vals)

    def result(self, profile: RobotProfile) -> Calibration:
        """The estimates, in the order and with the notes of :func:`calibrate`."""
        out = Calibration()
        r_est: float | None = None
        if self.radius is not None:
            r_est, samples = _fit_through_origin(*self.radius.pairs())
            out.estimates.append(
                Estimate(
                    "wheel_radius",
                    "Effective wheel radius",
                    "m",
                    r_est,
                    profile.wheel_radius,
                    self.radius.seen if self.radius.step > 1 else samples,
                    RADIUS_TOLERANCE,
                    "relative",
                    _join(
                        ""
                        if r_est is not None
                        else "too few straight, steady samples above 0.3 m/s",
                        self.radius.note(),
                    ),
                )
            )

        if self.track is not None:
            r_use = r_est if r_est is not None else profile.wheel_radius
            yaw_rate, ground_diff = self.track.pairs()
            b_est, samples = _fit_through_origin(yaw_rate, r_use * ground_diff)
            out.estimates.append(
                Estimate(
                    "track_width",
                    "Effective track width",
                    "m",
                    b_est,
                    profile.track_width,
                    self.track.seen if self.track.step > 1 else samples,
                    TRACK_TOLERANCE,
                    "relative",
                    _join(
                        (
                            "with the estimated wheel radius"
                            if r_est is not None
                            else "with the profile's wheel radius"
                        )
                        if b_est is not None
                        else "too few turning samples (|yaw rate| above 0.25 rad/s)",
                        self.track.note(),
                    ),
                )
            )

        # standstill means: gyro biases, then attitude minus accelerometer tilt
        tilt_note = "accelerometer mounting or attitude-estimate offset"
        for key, label, unit, tol, note in (
            ("gyro_bias_roll", "Gyro bias, roll rate", "rad/s", GYRO_BIAS_TOLERANCE, ""),
            ("gyro_bias_pitch", "Gyro bias, pitch rate", "rad/s", GYRO_BIAS_TOLERANCE, ""),
            ("gyro_bias_yaw", "Gyro bias, yaw rate", "rad/s", GYRO_BIAS_TOLERANCE, ""),
            ("accel_tilt_pitch", "Attitude minus accelerometer tilt, pitch", "rad", TILT_TOLERANCE, tilt_note),
            ("accel_tilt_roll", "Attitude minus accelerometer tilt, roll", "rad", TILT_TOLERANCE, tilt_note),
        ):  # fmt: skip
            if key not in self.sums:
                continue
            count = self.counts[key]
            mean = self.sums[key] / count if count >= MIN_SAMPLES else None
            out.estimates.append(
                Estimate(
                    key,
                    label,
                    unit,
                    mean,
                    0.0,
                    count,
                    tol,
                    "absolute",
                    note if mean is not None else "too little standstill",
                )  # fmt: skip
            )
        return out


def _calibrate_frames(
    frames: Iterable[pd.DataFrame], profile: RobotProfile, max_pairs: int | None
) -> Calibration:
    """Gather the selections of consecutive frames, then fit; see :func:`calibrate_chunks`."""
    acc: _Accumulator | None = None
    for frame in frames:
        sel = _select(frame, profile)
        if acc is None:
            acc = _Accumulator(sel.layout(), max_pairs)
        acc.add(sel)
        del sel
    return Calibration() if acc is None else acc.result(profile)


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
    return _calibrate_frames([frame], profile, None)


def calibrate_chunks(
    frames: Iterable[pd.DataFrame], profile: RobotProfile, max_pairs: int = MAX_FIT_PAIRS
) -> Calibration:
    """:func:`calibrate` of a run fed as consecutive chunks of rows, in bounded memory.

    Every sample is selected (straight, turning, standstill) on its own values, so
    the chunks' selections together are the whole run's. The gyro biases and tilts
    are means from running sums and counts; the two fits collect their selected
    pairs and are fitted at the end, as in :func:`calibrate`.

    Parameters
    ----------
    frames : iterable of DataFrame
        The run's rows in time order, cut into consecutive chunks without overlap,
        all with the same columns (catalogue names, SI units, column ``t``). Which
        estimates are made is decided by the first chunk's columns.
    profile : RobotProfile
        The profile to check (wheel radius, track width, encoder reference).
    max_pairs : int, optional
        Most (x, y) pairs held per fit; at least ``2 * MIN_SAMPLES``. Beyond it the
        fit rests on selected samples number 0, k, 2k, ... (k a power of two, as
        small as fits), and the estimate's note names k; ``samples`` stays the
        number of selected samples.

    Returns
    -------
    Calibration
        The estimates of :func:`calibrate` on the whole run: identical while no fit
        is thinned, except that the means may differ in the last bits (the order
        of additions); empty when ``frames`` is empty.

    Raises
    ------
    ValueError
        If ``max_pairs`` is below ``2 * MIN_SAMPLES``, or a chunk's columns allow
        other estimates than the first chunk's.
    """
    if max_pairs < 2 * MIN_SAMPLES:
        raise ValueError(f"max_pairs must be at least {2 * MIN_SAMPLES}, got {max_pairs}")
    return _calibrate_frames(frames, profile, max_pairs)
