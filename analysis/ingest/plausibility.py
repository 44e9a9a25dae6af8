"""Plausibility checks at ingest: values that say a unit, a sign or a time base is wrong.

A channel map can be valid (every unit of the right dimension) and still wrong:
milliseconds declared as seconds, radians declared as degrees, a flipped
accelerometer axis. These checks look at the stored SI values of one stream and
return warnings for the ingest report. They never refuse the run: the data may
be right and unusual, and the person reading the warning decides.

Each warning is a dict ``{"check", "signal", "message"}``; the message says what
was found, the value, and what would make it plausible. Checks:

- ``time_unit``: sample rate outside 1 Hz..10 kHz, or a duration over 48 h;
  names the time unit that would give a plausible rate.
- ``angle_unit``: an angle mapped in degrees whose raw values all stay within
  ±0.5 (likely radians), or mapped in radians that exceeds ±7 (likely degrees;
  not applied to yaw or wheel angles, which may be unwrapped over many turns).
- ``wheel_speed``: a wheel's rim speed ``r |w|`` over 30 m/s.
- ``accel_z``: the median ``accel_z`` at rest is not within 1.5 m/s² of
  +9.81 m/s² (at rest and level the accelerometer reads +g on z).
- ``yaw_sign``: the gyro yaw rate and the rate of change of the yaw angle
  disagree in sign (correlation below -0.5 while the robot turns).

The limits are this project's engineering choices (common practice, no source).
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

import numpy as np

from analysis import catalogue as cat
from analysis.catalogue import G0
from analysis.ingest.channel_map import SourceSpec
from analysis.profile import RobotProfile

RATE_MIN_HZ = 1.0  # Hz
RATE_MAX_HZ = 10_000.0  # Hz
DURATION_MAX_S = 48 * 3600.0  # s
ANGLE_DEG_MAX_RAW = 0.5  # raw value of an angle mapped in deg that looks like rad
ANGLE_RAD_MAX_RAW = 7.0  # raw value of an angle mapped in rad that looks like deg
WHEEL_SPEED_MAX = 30.0  # m/s
ACCEL_Z_TOLERANCE = 1.5  # m/s², covers a robot standing tilted by up to ~30 deg
REST_SPEED = 0.05  # m/s, "at rest" for the accel_z check
MIN_REST_SAMPLES = 20
YAW_CORRELATION_MIN = -0.5  # below this the two yaw signals disagree in sign
YAW_RATE_MIN_RMS = 0.02  # rad/s: below this the robot hardly turned; no yaw check
YAW_WINDOW_S = 0.1  # s, span of the yaw-angle difference

#: Seconds per unit of each time unit the channel map accepts.
TIME_UNITS = {"s": 1.0, "ms": 1e-3, "us": 1e-6, "ns": 1e-9}

#: Angle signals checked both ways; yaw only for "mapped in deg, stays within ±0.5".
ANGLES_BOTH = (cat.ROLL, cat.PITCH, cat.ROLL_REF, cat.PITCH_REF)


def _warn(check: str, signal: str | None, message: str) -> dict[str, Any]:
    return {"check": check, "signal": signal, "message": message}


def check_time_base(source: SourceSpec, rate_hz: float | None, duration_s: float) -> list[dict]:
    """Warn when the sample rate or duration says the time unit is wrong.

    Parameters
    ----------
    source : SourceSpec
        The stream's source (time column and unit).
    rate_hz : float or None
        1 / median sample period, as the ingest measured it. [Hz]
    duration_s : float
        Last minus first time. [s]

    Returns
    -------
    list of dict
        Zero or one ``time_unit`` warning.
    """
    rate_bad = rate_hz is not None and not RATE_MIN_HZ <= rate_hz <= RATE_MAX_HZ
    long_bad = duration_s > DURATION_MAX_S
    if not rate_bad and not long_bad:
        return []
    found = []
    if rate_bad:
        found.append(f"a sample rate of {rate_hz:.4g} Hz (outside {RATE_MIN_HZ:g} Hz..10 kHz)")
    if long_bad:
        found.append(f"a duration of {duration_s / 3600.0:.4g} h (over 48 h)")
    msg = (
        f"Source {source.name!r}: time column {source.time_column!r} read as "
        f"{source.time_unit!r} gives {' and '.join(found)}; the time unit is likely wrong."
    )
    mapped = TIME_UNITS.get(source.time_unit)
    if mapped is not None and rate_hz is not None:
        fits = []
        for unit, secs in TIME_UNITS.items():
            if unit == source.time_unit:
                continue
            rate = rate_hz * mapped / secs
            dur = duration_s * secs / mapped
            if RATE_MIN_HZ <= rate <= RATE_MAX_HZ and dur <= DURATION_MAX_S:
                fits.append(f'time_unit = "{unit}" would give {rate:.4g} Hz over {dur:.4g} s')
        if fits:
            msg += " " + "; ".join(fits) + "."
    return [_warn("time_unit", source.time_column, msg)]


def _finite(x: np.ndarray) -> np.ndarray:
    x = np.asarray(x, dtype=float)
    return x[np.isfinite(x)]


def check_values(
    source: SourceSpec,
    t: np.ndarray,
    values: Mapping[str, np.ndarray],
    profile: RobotProfile,
) -> list[dict]:
    """Warn about angle units, wheel speed, accel_z at rest and the yaw-rate sign.

    Parameters
    ----------
    source : SourceSpec
        The stream's source: which raw column and unit each signal came from.
    t : ndarray
        Stream time. [s]
    values : mapping of str to ndarray
        Stored SI values by canonical signal name (any subset of the stream's).
    profile : RobotProfile
        Wheel radius and the wheel actuators.

    Returns
    -------
    list of dict
        Warnings (see the module docstring).
    """
    out: list[dict] = []
    specs = {c.signal: c for c in source.columns}
    wheels = {a.name for a in profile.wheels().values()}
    joints = [f"{a}.{cat.POS}" for a in profile.actuator_names if a not in wheels]
    for signal in (*ANGLES_BOTH, cat.YAW, *joints):
        if signal not in values or signal not in specs:
            continue
        spec = specs[signal]
        x = _finite(values[signal])
        if x.size == 0 or spec.multiplier == 0:
            continue
        raw_max = float(np.max(np.abs(x / spec.multiplier)))
        in_rad = abs(spec.factor - 1.0) < 1e-12
        if not in_rad and 0.0 < raw_max <= ANGLE_DEG_MAX_RAW:
            out.append(
                _warn(
                    "angle_unit",
                    signal,
                    f"{signal} (column {spec.raw!r}, mapped in {spec.unit!r}) stays within "
                    f"±{raw_max:.3g} {spec.unit} over the whole run; the values look like "
                    f'radians: set unit = "rad" if they are.',
                )
            )
        elif in_rad and signal != cat.YAW and raw_max > ANGLE_RAD_MAX_RAW:
            out.append(
                _warn(
                    "angle_unit",
                    signal,
                    f"{signal} (column {spec.raw!r}, mapped in 'rad') reaches {raw_max:.3g} rad "
                    f"({np.rad2deg(raw_max):.3g} deg); the values look like degrees: "
                    f'set unit = "deg" if they are.',
                )
            )
    for wheel in sorted(wheels):
        signal = f"{wheel}.{cat.VEL}"
        if signal not in values:
            continue
        w = _finite(values[signal])
        if w.size == 0:
            continue
        top = float(np.max(np.abs(w))) * profile.wheel_radius
        if top > WHEEL_SPEED_MAX:
            unit = specs[signal].unit if signal in specs else "?"
            out.append(
                _warn(
                    "wheel_speed",
                    signal,
                    f"{signal} (mapped in {unit!r}) reaches {top:.4g} m/s at the rim "
                    f"(r = {profile.wheel_radius:g} m), over {WHEEL_SPEED_MAX:g} m/s; "
                    f"the unit is likely wrong (rpm against rad/s is a factor 9.55, "
                    f"deg/s against rad/s 57.3).",
                )
            )
    if cat.ACCEL_Z in values:
        out += _check_accel_z(source, values, profile)
    if cat.YAW in values and cat.YAW_RATE in values:
        out += _check_yaw_sign(t, values[cat.YAW], values[cat.YAW_RATE])
    return out


def _rest_mask(values: Mapping[str, np.ndarray], profile: RobotProfile) -> np.ndarray | None:
    if cat.VEL_X in values:
        return np.abs(np.asarray(values[cat.VEL_X], dtype=float)) < REST_SPEED
    wheels = [f"{a.name}.{cat.VEL}" for a in profile.wheels().values()]
    rates = [np.asarray(values[w], dtype=float) for w in wheels if w in values]
    if rates:
        return np.all([np.abs(r) * profile.wheel_radius < REST_SPEED for r in rates], axis=0)
    return None


def _check_accel_z(
    source: SourceSpec, values: Mapping[str, np.ndarray], profile: RobotProfile
) -> list[dict]:
    az = np.asarray(values[cat.ACCEL_Z], dtype=float)
    rest = _rest_mask(values, profile)
    where = "at rest"
    if rest is None or int((rest & np.isfinite(az)).sum()) < MIN_REST_SAMPLES:
        rest, where = np.ones(az.size, dtype=bool), "over the run (no rest found)"
    sample = az[rest & np.isfinite(az)]
    if sample.size < MIN_REST_SAMPLES:
        return []
    med = float(np.median(sample))
    if abs(med - G0) <= ACCEL_Z_TOLERANCE:
        return []
    spec = next((c for c in source.columns if c.signal == cat.ACCEL_Z), None)
    unit = spec.unit if spec else "?"
    hint = ""
    if abs(med + G0) <= ACCEL_Z_TOLERANCE:
        hint = " The sign looks flipped: add scale = -1 to the accel_z column."
    elif med != 0 and abs(G0 / med - G0) < 0.05 * G0:
        hint = ' The values look like multiples of g: set unit = "g0".'
    elif med != 0:
        hint = f" A factor of {G0 / med:.3g} would bring it to +9.81 m/s²."
    return [
        _warn(
            "accel_z",
            cat.ACCEL_Z,
            f"accel_z (mapped in {unit!r}) has a median of {med:.4g} m/s² {where}; at rest "
            f"and level the accelerometer reads +9.81 m/s² on z, so its sign or unit is "
            f"likely wrong.{hint}",
        )
    ]


def _check_yaw_sign(t: np.ndarray, yaw: np.ndarray, yaw_rate: np.ndarray) -> list[dict]:
    t = np.asarray(t, dtype=float)
    yaw = np.asarray(yaw, dtype=float)
    rate = np.asarray(yaw_rate, dtype=float)
    ok = np.isfinite(t) & np.isfinite(yaw) & np.isfinite(rate)
    t, yaw, rate = t[ok], yaw[ok], rate[ok]
    if t.size < 10:
        return []
    period = float(np.median(np.diff(t)))
    if period <= 0:
        return []
    k = max(1, int(round(YAW_WINDOW_S / period)))
    if t.size <= k:
        return []
    yaw_u = np.unwrap(yaw)
    span = t[k:] - t[:-k]
    good = span <= 2.0 * k * period  # no data gap inside the window
    with np.errstate(invalid="ignore", divide="ignore"):
        d_yaw = (yaw_u[k:] - yaw_u[:-k]) / span
    mean_rate = 0.5 * (rate[k:] + rate[:-k])
    d_yaw, mean_rate = d_yaw[good], mean_rate[good]
    if d_yaw.size == 0 or float(np.sqrt(np.mean(mean_rate**2))) < YAW_RATE_MIN_RMS:
        return []
    denom = float(np.sqrt(np.sum(d_yaw**2) * np.sum(mean_rate**2)))
    if denom == 0:
        return []
    corr = float(np.sum(d_yaw * mean_rate) / denom)
    if corr >= YAW_CORRELATION_MIN:
        return []
    return [
        _warn(
            "yaw_sign",
            cat.YAW_RATE,
            f"yaw_rate and the rate of change of yaw disagree in sign (correlation {corr:.2f}); "
            f"one of them is likely flipped: yaw rate is positive turning left (ISO 8855). "
            f"Add scale = -1 to the column that is wrong.",
        )
    ]
