"""The signal catalogue: the one place that spells a signal name.

Every canonical signal has a name, an SI unit (as a pint string), a frame or
sign convention and a one-line meaning. Frames follow ISO 8855 vehicle axes:
x forward, y left, z up; roll positive right side down, pitch positive nose
down, yaw rate positive turning left.

Actuator signals are ``<actuator>.<quantity>`` with the actuator named in the
robot profile (``wheel_l``, ``hip_r``, ...). Leg lengths are ``leg_l.length``
and ``leg_r.length``. Columns that a channel map does not name are kept as
``extra.<original name>``.

Derived series (computed by the detectors, stored with the analysis results)
are named here too, so that the server, the page and the comparison never
retype them.
"""

from __future__ import annotations

from dataclasses import dataclass

G0 = 9.80665  # m/s², standard gravity, ISO 80000-3


@dataclass(frozen=True)
class Signal:
    """One catalogue entry."""

    name: str
    unit: str
    convention: str
    meaning: str


# --- time -------------------------------------------------------------------
T = "t"

# --- base attitude and rates ------------------------------------------------
ROLL = "roll"
PITCH = "pitch"
YAW = "yaw"
ROLL_RATE = "roll_rate"
PITCH_RATE = "pitch_rate"
YAW_RATE = "yaw_rate"

# --- body-frame specific force (at rest and level, accel_z reads +g0) -------
ACCEL_X = "accel_x"
ACCEL_Y = "accel_y"
ACCEL_Z = "accel_z"

# --- estimated base velocity -------------------------------------------------
VEL_X = "vel_x"
VEL_Y = "vel_y"

# --- legs --------------------------------------------------------------------
LEG_L_LENGTH = "leg_l.length"
LEG_R_LENGTH = "leg_r.length"

# --- references --------------------------------------------------------------
ROLL_REF = "roll_ref"
PITCH_REF = "pitch_ref"
HEIGHT_REF = "height_ref"
VEL_X_REF = "vel_x_ref"
YAW_RATE_REF = "yaw_rate_ref"

EXTRA_PREFIX = "extra."

_BASE = [
    Signal(T, "s", "seconds since the run's first sample", "Time"),
    Signal(ROLL, "rad", "ISO 8855, positive right side down", "Body roll angle"),
    Signal(PITCH, "rad", "ISO 8855, positive nose down", "Body pitch angle"),
    Signal(YAW, "rad", "ISO 8855, positive counter-clockwise seen from above", "Heading"),
    Signal(ROLL_RATE, "rad/s", "about body x, positive right side going down", "Roll rate"),
    Signal(PITCH_RATE, "rad/s", "about body y, positive nose going down", "Pitch rate"),
    Signal(YAW_RATE, "rad/s", "about z, positive turning left", "Yaw rate"),
    Signal(ACCEL_X, "m/s**2", "body x, specific force", "Accelerometer, forward axis"),
    Signal(ACCEL_Y, "m/s**2", "body y (left), specific force", "Accelerometer, lateral axis"),
    Signal(ACCEL_Z, "m/s**2", "body z (up), specific force, +g0 at rest", "Accelerometer, up axis"),
    Signal(VEL_X, "m/s", "heading frame, forward", "Estimated base forward velocity"),
    Signal(VEL_Y, "m/s", "heading frame, left", "Estimated base lateral velocity"),
    Signal(LEG_L_LENGTH, "m", "axle-to-base distance", "Left leg length"),
    Signal(LEG_R_LENGTH, "m", "axle-to-base distance", "Right leg length"),
    Signal(ROLL_REF, "rad", "as roll", "Roll (lean) reference"),
    Signal(PITCH_REF, "rad", "as pitch", "Pitch reference"),
    Signal(HEIGHT_REF, "m", "axle-to-base distance", "Height (leg length) reference"),
    Signal(VEL_X_REF, "m/s", "as vel_x", "Forward velocity reference"),
    Signal(YAW_RATE_REF, "rad/s", "as yaw_rate", "Yaw rate reference"),
]

#: Catalogue entries of the base (non-actuator) signals, by name.
BASE_SIGNALS: dict[str, Signal] = {s.name: s for s in _BASE}

# --- actuator quantities -------------------------------------------------------
TORQUE_REQ = "torque_req"
TORQUE_CMD = "torque_cmd"
TORQUE = "torque"
VEL = "vel"
POS = "pos"

#: Unit, convention and meaning of each actuator quantity.
ACTUATOR_QUANTITIES: dict[str, tuple[str, str, str]] = {
    TORQUE_REQ: ("N*m", "joint axis", "Torque requested, before the limiter"),
    TORQUE_CMD: ("N*m", "joint axis", "Torque sent to the drive, after the limiter"),
    TORQUE: ("N*m", "joint axis", "Torque measured or estimated"),
    VEL: ("rad/s", "joint axis; wheels positive rolling forward", "Joint velocity"),
    POS: ("rad", "joint axis", "Joint angle"),
}


def actuator_signal(actuator: str, quantity: str) -> str:
    """Return the canonical name of an actuator quantity, e.g. ``wheel_l.torque_cmd``.

    Parameters
    ----------
    actuator : str
        Actuator name from the robot profile.
    quantity : str
        One of ``torque_req``, ``torque_cmd``, ``torque``, ``vel``, ``pos``.
    """
    if quantity not in ACTUATOR_QUANTITIES:
        known = ", ".join(ACTUATOR_QUANTITIES)
        raise KeyError(f"Unknown actuator quantity {quantity!r}; use one of: {known}.")
    return f"{actuator}.{quantity}"


def leg_length(side: str) -> str:
    """Return the leg-length signal of side ``"l"`` or ``"r"``."""
    return {"l": LEG_L_LENGTH, "r": LEG_R_LENGTH}[side]


def extra(column: str) -> str:
    """Return the archive name of a column the channel map does not name."""
    return f"{EXTRA_PREFIX}{column}"


def lookup(name: str, actuators: list[str] | tuple[str, ...] = ()) -> Signal | None:
    """Return the catalogue entry of a canonical signal, or None if unknown.

    Parameters
    ----------
    name : str
        Canonical name, e.g. ``roll`` or ``wheel_l.vel``.
    actuators : sequence of str
        Actuator names from the robot profile; actuator signals of other names
        are unknown.
    """
    if name in BASE_SIGNALS:
        return BASE_SIGNALS[name]
    actuator, _, quantity = name.partition(".")
    if quantity in ACTUATOR_QUANTITIES and actuator in actuators:
        unit, convention, meaning = ACTUATOR_QUANTITIES[quantity]
        return Signal(name, unit, convention, f"{meaning} ({actuator})")
    return None


def known_names(actuators: list[str] | tuple[str, ...] = ()) -> list[str]:
    """List every canonical signal name valid for a robot with these actuators."""
    names = [n for n in BASE_SIGNALS if n != T]
    names += [f"{a}.{q}" for a in actuators for q in ACTUATOR_QUANTITIES]
    return names


# --- derived series (analysis results) ---------------------------------------
# Per actuator: "<actuator>.<suffix>"; per wheel likewise; whole robot: plain.
TORQUE_AVAILABLE = "torque_available"  # N*m, torque the drive can give at |vel|
SATURATED = "saturated"  # bool, sample is saturated
TORQUE_RMS = "torque_rms"  # N*m, sliding-window RMS torque (thermal load)
RIM_SPEED = "rim_speed"  # m/s, r (w_joint + pitch_rate)
CONTACT_SPEED = "contact_speed"  # m/s, ground speed of the wheel contact
SLIP_SPEED = "slip_speed"  # m/s, rim_speed - contact_speed
SLIP_RATIO = "slip_ratio"  # -, SAE J670 longitudinal slip ratio

YAW_RATE_WHEELS = "yaw_rate_wheels"  # rad/s, r (w_R - w_L) / b
SPECIFIC_FORCE_Y = "specific_force_y"  # m/s², CoM specific force, heading frame, left
SPECIFIC_FORCE_Z = "specific_force_z"  # m/s², CoM specific force, heading frame, up
COM_HEIGHT = "com_height"  # m, L_c: CoM distance from the ground along body z
ZMP_Y = "zmp_y"  # m, lateral ZMP in the heading frame, left positive
TIP_MARGIN = "tip_margin"  # -, 1 - |y_zmp| / (b/2)
STATIC_STABILITY_FACTOR = "static_stability_factor"  # -, b / (2 L_c)
FORCE_ANGLE = "force_angle"  # rad, force-angle margin (Papadopoulos & Rey 1996)
ROLL_ERROR = "roll_error"  # rad, roll_ref - roll
ROLL_ZMP_LEAN = "roll_zmp_lean"  # rad, lean that centres the ZMP, -atan(f_y / f_z)

_DERIVED = [
    Signal(TORQUE_AVAILABLE, "N*m", "magnitude", "Torque the drive can give at the joint speed"),
    Signal(SATURATED, "", "boolean", "Sample is saturated"),
    Signal(TORQUE_RMS, "N*m", "magnitude", "Sliding-window RMS torque (thermal load)"),
    Signal(RIM_SPEED, "m/s", "forward", "Wheel rim speed relative to the ground frame"),
    Signal(CONTACT_SPEED, "m/s", "forward", "Ground speed of the wheel contact point"),
    Signal(SLIP_SPEED, "m/s", "forward; positive = rim ahead", "Rim speed minus contact speed"),
    Signal(SLIP_RATIO, "", "SAE J670", "Longitudinal slip ratio"),
    Signal(YAW_RATE_WHEELS, "rad/s", "as yaw_rate", "Yaw rate from the wheel speeds"),
    Signal(SPECIFIC_FORCE_Y, "m/s**2", "heading frame, left", "CoM specific force, lateral"),
    Signal(SPECIFIC_FORCE_Z, "m/s**2", "heading frame, up", "CoM specific force, vertical"),
    Signal(COM_HEIGHT, "m", "along body z from the ground", "CoM height model L_c"),
    Signal(ZMP_Y, "m", "heading frame, left", "Lateral zero-moment point"),
    Signal(TIP_MARGIN, "", "1 centred, 0 inner wheel unloads", "Lateral tip-over margin"),
    Signal(STATIC_STABILITY_FACTOR, "", "b / (2 L_c)", "Static stability factor"),
    Signal(FORCE_ANGLE, "rad", "0 at tip-over, negative beyond", "Force-angle tip-over margin"),
    Signal(ROLL_ERROR, "rad", "roll_ref - roll", "Roll tracking error"),
    Signal(ROLL_ZMP_LEAN, "rad", "as roll", "Lean that would centre the ZMP"),
]

#: Catalogue entries of derived series, by suffix (per actuator/wheel) or name.
DERIVED_SIGNALS: dict[str, Signal] = {s.name: s for s in _DERIVED}

# --- event kinds ---------------------------------------------------------------
SATURATION = "saturation"
SLIP = "slip"
YAW_SLIP = "yaw_slip"
LOW_TIP_MARGIN = "low_tip_margin"
# roll_error is both a derived series and an event kind: ROLL_ERROR serves both.
PITCH_EXCURSION = "pitch_excursion"
FALL = "fall"

#: Every event kind, in display order, with a one-line meaning.
EVENT_KINDS: dict[str, str] = {
    SATURATION: "Actuator asked for more torque than it could give",
    SLIP: "Wheel rim speed departed from contact ground speed (spin or skid)",
    YAW_SLIP: "Yaw rate from the wheels disagrees with the gyro",
    LOW_TIP_MARGIN: "Lateral tip-over margin below threshold",
    ROLL_ERROR: "Roll left the tracking tolerance band",
    PITCH_EXCURSION: "Pitch beyond the profile limit",
    FALL: "Pitch beyond the recoverable angle, or the run ended tilted",
}
