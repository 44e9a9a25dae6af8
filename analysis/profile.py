"""Robot profile and detector thresholds, read from TOML and checked whole.

A profile describes one robot: wheel radius, track width, mass, a model of the
centre-of-mass height, how the wheel encoders are referenced, and per actuator
its role, side, torque ratings and optional DC-motor constants. It also carries
the default detector thresholds; a separate thresholds file can override them
for one analysis.

File keys carry their unit as a suffix (``wheel_radius_m``, ``roll_band_deg``);
the loaded objects hold SI values (m, rad, s, N*m) without suffix where the unit
is clear, converted with pint, never with hand-written factors.
"""

from __future__ import annotations

import tomllib
from collections.abc import Mapping
from dataclasses import asdict, dataclass, field
from functools import lru_cache
from pathlib import Path
from typing import Any

import numpy as np
import pint

from analysis.errors import ProfileError, ThresholdsError


@lru_cache(maxsize=1)
def unit_registry() -> pint.UnitRegistry:
    """Return the project's one pint registry.

    Parsed definitions are kept in pint's own cache folder (``cache_folder=":auto:"``,
    the user's cache directory): parsing them takes 0.1 to 0.4 s at every start, the
    cached copy about 0.03 s (measured). Without a writable cache folder, it parses.
    """
    try:
        return pint.UnitRegistry(cache_folder=":auto:")
    except OSError:
        return pint.UnitRegistry()


def _to_si(value: float, unit: str, si_unit: str) -> float:
    ureg = unit_registry()
    return float(ureg.Quantity(value, unit).to(si_unit).magnitude)


# --- thresholds --------------------------------------------------------------


@dataclass(frozen=True)
class ThresholdSpec:
    """One documented threshold: file key, unit in the file, SI field, default."""

    key: str
    unit: str
    si_unit: str
    default: float
    meaning: str


#: Every detector threshold, its file key, unit, default (in the file's unit) and meaning.
#: Defaults are engineering choices of this project (common practice, no source)
#: unless noted.
THRESHOLD_SPECS: dict[str, ThresholdSpec] = {
    s.key: s
    for s in [
        ThresholdSpec("min_duration_s", "s", "s", 0.05, "Events shorter than this are dropped."),
        ThresholdSpec(
            "merge_gap_s", "s", "s", 0.25, "Events of one kind and channel closer than this merge."
        ),
        ThresholdSpec(
            "saturation_eps_nm",
            "N*m",
            "N*m",
            0.05,
            "Saturated where |torque_req| > |torque_cmd| + this.",
        ),
        ThresholdSpec(
            "saturation_tol",
            "",
            "",
            0.02,
            "Without torque_req: saturated where |torque_cmd| >= (1 - this) * available torque.",
        ),
        ThresholdSpec(
            "thermal_window_s", "s", "s", 10.0, "Sliding window of the RMS torque (thermal load)."
        ),
        ThresholdSpec(
            "slip_ratio_on", "", "", 0.2, "A slip event starts where |slip ratio| exceeds this."
        ),
        ThresholdSpec("slip_ratio_off", "", "", 0.1, "... and ends where it falls below this."),
        ThresholdSpec(
            "slip_speed_min_m_s",
            "m/s",
            "m/s",
            0.1,
            "Slip also needs |rim - contact speed| above this, held for at least 0.02 s, so "
            "sensor noise at walking pace is no slip.",
        ),
        ThresholdSpec(
            "slip_min_ref_speed_m_s",
            "m/s",
            "m/s",
            0.5,
            "Floor of the slip-ratio denominator |contact speed|, so low speeds give no false slip.",
        ),
        ThresholdSpec(
            "yaw_rate_diff_on_deg_s",
            "deg/s",
            "rad/s",
            15.0,
            "A yaw_slip event starts where |wheel yaw rate - gyro| exceeds this.",
        ),
        ThresholdSpec("yaw_rate_diff_off_deg_s", "deg/s", "rad/s", 8.0, "... and ends below this."),
        ThresholdSpec(
            "tip_margin_on",
            "",
            "",
            0.3,
            "A low_tip_margin event starts where the margin drops below this.",
        ),
        ThresholdSpec("tip_margin_off", "", "", 0.35, "... and ends where it rises above this."),
        ThresholdSpec(
            "accel_cutoff_hz",
            "Hz",
            "Hz",
            5.0,
            "Cut-off of the zero-phase Butterworth low-pass on the accelerometer.",
        ),
        ThresholdSpec(
            "roll_band_deg", "deg", "rad", 3.0, "Roll tracking tolerance band, |roll_ref - roll|."
        ),
        ThresholdSpec(
            "roll_lag_max_s", "s", "s", 1.0, "Largest lag searched in the roll cross-correlation."
        ),
        ThresholdSpec(
            "pitch_limit_deg", "deg", "rad", 20.0, "A pitch_excursion event is |pitch| beyond this."
        ),
        ThresholdSpec(
            "fall_pitch_deg",
            "deg",
            "rad",
            45.0,
            "A fall is |pitch| beyond this (past recovery), or the run ending beyond pitch_limit.",
        ),
        ThresholdSpec(
            "fall_end_window_s",
            "s",
            "s",
            1.0,
            "The run 'ended tilted' if |pitch| stays beyond pitch_limit over its last this many seconds.",
        ),
    ]
}


def _field_name(key: str) -> str:
    """File key -> SI field name: drop a unit suffix that no longer applies."""
    for suffix in ("_deg_s", "_deg", "_nm", "_m_s", "_hz"):
        if key.endswith(suffix):
            return key[: -len(suffix)]
    return key


@dataclass(frozen=True)
class Thresholds:
    """Detector thresholds in SI units (rad, rad/s, m/s, N*m, s, Hz; ratios [-]).

    Field names follow :data:`THRESHOLD_SPECS` with the unit suffix dropped where
    the value was converted (``roll_band_deg`` -> ``roll_band`` in rad); time
    spans keep ``_s``.
    """

    min_duration_s: float
    merge_gap_s: float
    saturation_eps: float
    saturation_tol: float
    thermal_window_s: float
    slip_ratio_on: float
    slip_ratio_off: float
    slip_speed_min: float
    slip_min_ref_speed: float
    yaw_rate_diff_on: float
    yaw_rate_diff_off: float
    tip_margin_on: float
    tip_margin_off: float
    accel_cutoff: float
    roll_band: float
    roll_lag_max_s: float
    pitch_limit: float
    fall_pitch: float
    fall_end_window_s: float

    @classmethod
    def defaults(cls) -> Thresholds:
        """Return the documented defaults."""
        return cls.from_mapping({}, where="defaults")

    @classmethod
    def from_mapping(
        cls, values: Mapping[str, Any], base: Thresholds | None = None, where: str = "thresholds"
    ) -> Thresholds:
        """Build thresholds from file keys (units as in the file), over ``base`` or the defaults."""
        unknown = sorted(set(values) - set(THRESHOLD_SPECS))
        if unknown:
            raise ThresholdsError(
                f"Unknown threshold key(s) {', '.join(unknown)} in {where}. "
                f"Valid keys: {', '.join(THRESHOLD_SPECS)}."
            )
        out: dict[str, float] = {}
        for key, spec in THRESHOLD_SPECS.items():
            name = _field_name(key)
            if key in values:
                raw = values[key]
                if isinstance(raw, bool) or not isinstance(raw, int | float):
                    raise ThresholdsError(
                        f"Threshold {key} in {where} must be a number in {spec.unit or '[-]'}, "
                        f"found {raw!r}."
                    )
                if not np.isfinite(raw) or raw < 0:
                    raise ThresholdsError(
                        f"Threshold {key} in {where} must be a finite number >= 0, found {raw!r}."
                    )
                out[name] = _to_si(float(raw), spec.unit, spec.si_unit) if spec.unit else float(raw)
            elif base is not None:
                out[name] = getattr(base, name)
            else:
                out[name] = (
                    _to_si(spec.default, spec.unit, spec.si_unit) if spec.unit else spec.default
                )
        result = cls(**out)
        result._check_pairs(where)
        return result

    def _check_pairs(self, where: str) -> None:
        pairs = [
            ("slip_ratio_off", "slip_ratio_on", self.slip_ratio_off <= self.slip_ratio_on),
            (
                "yaw_rate_diff_off_deg_s",
                "yaw_rate_diff_on_deg_s",
                self.yaw_rate_diff_off <= self.yaw_rate_diff_on,
            ),
            ("tip_margin_on", "tip_margin_off", self.tip_margin_on <= self.tip_margin_off),
            ("pitch_limit_deg", "fall_pitch_deg", self.pitch_limit <= self.fall_pitch),
        ]
        for low, high, ok in pairs:
            if not ok:
                raise ThresholdsError(
                    f"In {where}, {low} must not exceed {high} (hysteresis needs the exit "
                    f"threshold on the safe side of the entry threshold)."
                )

    def to_file_dict(self) -> dict[str, float]:
        """Return the thresholds as file keys in file units (for meta and results)."""
        out: dict[str, float] = {}
        for key, spec in THRESHOLD_SPECS.items():
            value = getattr(self, _field_name(key))
            out[key] = _to_si(value, spec.si_unit, spec.unit) if spec.unit else value
        return out


def load_thresholds(path: str | Path, base: Thresholds | None = None) -> Thresholds:
    """Read a thresholds TOML file (keys as in :data:`THRESHOLD_SPECS`, top level or [thresholds])."""
    data = _read_toml(Path(path), ThresholdsError, "thresholds file")
    table = data.get("thresholds", data)
    if not isinstance(table, dict):
        raise ThresholdsError(f"{path}: [thresholds] must be a table of key = number.")
    return Thresholds.from_mapping(table, base=base, where=str(path))


# --- profile -----------------------------------------------------------------


@dataclass(frozen=True)
class MotorConstants:
    """DC-motor constants of one drive, referred to the joint.

    Attributes: ``k_t`` torque constant [N*m/A], ``k_e`` back-EMF constant
    [V*s/rad], ``resistance`` winding resistance [ohm], ``bus_voltage`` [V].
    """

    k_t: float
    k_e: float
    resistance: float
    bus_voltage: float


ROLES = ("wheel", "hip", "knee", "other")
SIDES = {"left": "l", "right": "r", "l": "l", "r": "r"}


@dataclass(frozen=True)
class Actuator:
    """One actuator of the robot.

    Attributes: ``name`` as used in signal names; ``role`` one of :data:`ROLES`;
    ``side`` ``"l"``, ``"r"`` or None; ``peak_torque`` and ``continuous_torque``
    [N*m]; ``motor`` optional :class:`MotorConstants`; ``saturation_tol`` and
    ``saturation_eps`` [-, N*m] optional per-actuator overrides of the thresholds.
    """

    name: str
    role: str
    side: str | None
    peak_torque: float
    continuous_torque: float
    motor: MotorConstants | None = None
    saturation_tol: float | None = None
    saturation_eps: float | None = None


@dataclass(frozen=True)
class ComModel:
    """Centre-of-mass height model.

    ``constant``: ``L_c = height`` [m] from the ground along body z.
    ``linear``: ``L_c = r + offset + leg_factor * L`` with r the wheel radius and
    L the mean leg length (axle-to-base distance) [m].
    """

    model: str
    height: float = 0.0
    offset: float = 0.0
    leg_factor: float = 1.0

    def com_height(self, leg_length: np.ndarray | float, wheel_radius: float) -> np.ndarray:
        """CoM distance from the ground along body z. [m]

        Parameters
        ----------
        leg_length : ndarray or float
            Mean axle-to-base distance; ignored by the constant model. [m]
        wheel_radius : float
            Wheel radius. [m]
        """
        leg = np.asarray(leg_length, dtype=float)
        if self.model == "constant":
            return np.full_like(leg, self.height, dtype=float)
        return wheel_radius + self.offset + self.leg_factor * leg


@dataclass(frozen=True)
class RobotProfile:
    """One robot's geometry, mass model, actuators and default thresholds (SI)."""

    name: str
    wheel_radius: float
    track_width: float
    mass: float
    com: ComModel
    wheel_encoder_reference: str
    actuators: tuple[Actuator, ...]
    thresholds: Thresholds = field(default_factory=Thresholds.defaults)

    @property
    def actuator_names(self) -> tuple[str, ...]:
        """Names of all actuators, in file order."""
        return tuple(a.name for a in self.actuators)

    def actuator(self, name: str) -> Actuator:
        """Return one actuator by name."""
        for a in self.actuators:
            if a.name == name:
                return a
        raise ProfileError(
            f"Profile {self.name!r} has no actuator {name!r}; actuators: "
            f"{', '.join(self.actuator_names)}."
        )

    def wheels(self) -> dict[str, Actuator]:
        """Wheel actuators by side: ``{"l": ..., "r": ...}``."""
        return {a.side: a for a in self.actuators if a.role == "wheel" and a.side}

    def to_dict(self) -> dict[str, Any]:
        """Plain-data copy for meta.json (SI values, thresholds in file keys)."""
        d = asdict(self)
        d["thresholds"] = self.thresholds.to_file_dict()
        return d


def _read_toml(path: Path, error: type[Exception], what: str) -> dict[str, Any]:
    if not path.is_file():
        raise error(f"The {what} {path} does not exist. Give the path of a TOML file.")
    try:
        with path.open("rb") as fh:
            return tomllib.load(fh)
    except tomllib.TOMLDecodeError as exc:
        raise error(f"The {what} {path} is not valid TOML: {exc}. Fix the line it names.") from exc
    except UnicodeDecodeError as exc:
        raise error(f"The {what} {path} is not UTF-8 text TOML.") from exc
    except RecursionError as exc:
        raise error(
            f"The {what} {path.name} is nested too deeply to read (arrays or tables inside "
            "each other hundreds of levels deep); see the README for its layout."
        ) from exc


def _number(table: Mapping[str, Any], key: str, where: str, *, positive: bool = True) -> float:
    if key not in table:
        raise ProfileError(
            f"Profile is missing {where}.{key}. Add it (see README, 'Robot profile')."
        )
    value = table[key]
    if isinstance(value, bool) or not isinstance(value, int | float) or not np.isfinite(value):
        raise ProfileError(f"Profile {where}.{key} must be a number, found {value!r}.")
    if positive and value <= 0:
        raise ProfileError(f"Profile {where}.{key} must be > 0, found {value!r}.")
    return float(value)


def _optional(table: Mapping[str, Any], key: str, where: str) -> float | None:
    return _number(table, key, where) if key in table else None


#: Keys a profile may hold, per table; anything else is refused with this list.
PROFILE_KEYS: dict[str, tuple[str, ...]] = {
    "": ("robot", "com", "actuators", "thresholds"),
    "robot": ("name", "wheel_radius_m", "track_width_m", "mass_kg", "wheel_encoder_reference"),
    "com": ("model", "height_m", "offset_m", "leg_factor"),
    "actuators.<name>": (
        "role", "side", "peak_torque_nm", "continuous_torque_nm", "k_t_nm_per_a",
        "k_e_v_s_per_rad", "resistance_ohm", "bus_voltage_v", "saturation_tol",
        "saturation_eps_nm",
    ),
}  # fmt: skip


class _Problems:
    """Collects every problem of a profile, so that one message lists them all."""

    def __init__(self) -> None:
        self.found: list[str] = []

    def add(self, message: str) -> None:
        self.found.append(message)

    def number(
        self, table: Mapping[str, Any], key: str, where: str, *, positive: bool = True
    ) -> float:
        try:
            return _number(table, key, where, positive=positive)
        except ProfileError as exc:
            self.add(str(exc))
            return float("nan")  # a stand-in (compares False): the profile is refused anyway

    def optional(self, table: Mapping[str, Any], key: str, where: str) -> float | None:
        return self.number(table, key, where) if key in table else None

    def unknown_keys(self, table: Mapping[str, Any], section: str, where: str) -> None:
        valid = PROFILE_KEYS[section]
        unknown = [k for k in table if k not in valid]
        if unknown:
            place = f"[{where}]" if where else "the top level"
            self.add(
                f"Unknown key(s) {', '.join(repr(k) for k in unknown)} in {place}. "
                f"Valid keys there: {', '.join(valid)}."
            )


def profile_from_dict(data: Mapping[str, Any], source: str = "profile") -> RobotProfile:
    """Build and check a :class:`RobotProfile` from parsed TOML.

    Raises one :class:`ProfileError` listing every missing, bad or unknown field
    (unknown keys with the list of valid ones), so that one fix round is enough.
    """
    problems = _Problems()
    problems.unknown_keys(data, "", "")
    robot = data.get("robot")
    if not isinstance(robot, dict):
        problems.add(
            f"{source}: no [robot] table. A profile needs [robot] with wheel_radius_m, "
            f"track_width_m, mass_kg and wheel_encoder_reference."
        )
        robot = {}
    else:
        problems.unknown_keys(robot, "robot", "robot")
    name = str(robot.get("name", "unnamed robot"))
    wheel_radius = problems.number(robot, "wheel_radius_m", "robot")
    track_width = problems.number(robot, "track_width_m", "robot")
    mass = problems.number(robot, "mass_kg", "robot")
    ref = robot.get("wheel_encoder_reference")
    if ref not in ("leg", "ground"):
        problems.add(
            f'Profile robot.wheel_encoder_reference must be "leg" (encoder measures the wheel '
            f'against its leg) or "ground", found {ref!r}.'
        )
        ref = "leg"

    com_t = data.get("com")
    com = ComModel("constant", height=1.0)
    if not isinstance(com_t, dict):
        problems.add(
            f'{source}: no [com] table. Give model = "constant" with height_m, or '
            f'model = "linear" with offset_m and leg_factor.'
        )
    else:
        problems.unknown_keys(com_t, "com", "com")
        model = com_t.get("model")
        if model == "constant":
            com = ComModel("constant", height=problems.number(com_t, "height_m", "com"))
        elif model == "linear":
            com = ComModel(
                "linear",
                offset=problems.number(com_t, "offset_m", "com", positive=False),
                leg_factor=problems.number(com_t, "leg_factor", "com", positive=False),
            )
        else:
            problems.add(f'Profile com.model must be "constant" or "linear", found {model!r}.')

    acts_t = data.get("actuators")
    if not isinstance(acts_t, dict) or not acts_t:
        problems.add(
            f"{source}: no [actuators.<name>] tables. Describe at least the two wheels, e.g. "
            f'[actuators.wheel_l] with role = "wheel", side = "left", peak_torque_nm, '
            f"continuous_torque_nm."
        )
        acts_t = {}
    actuators = []
    for act_name, t in acts_t.items():
        where = f"actuators.{act_name}"
        if not isinstance(t, dict):
            problems.add(f"Profile {where} must be a table.")
            continue
        if not act_name.replace("_", "").isalnum() or "." in act_name:
            problems.add(
                f"Actuator name {act_name!r} may hold only letters, digits and underscores."
            )
        problems.unknown_keys(t, "actuators.<name>", where)
        role = t.get("role")
        if role not in ROLES:
            problems.add(f"Profile {where}.role must be one of {', '.join(ROLES)}, found {role!r}.")
        side_raw = t.get("side")
        if side_raw is not None and side_raw not in SIDES:
            problems.add(f'Profile {where}.side must be "left" or "right", found {side_raw!r}.')
            side_raw = None
        side = SIDES[side_raw] if side_raw is not None else None
        if role == "wheel" and side is None and t.get("side") is None:
            problems.add(f'Profile {where} is a wheel and needs side = "left" or "right".')
        peak = problems.number(t, "peak_torque_nm", where)
        cont = problems.number(t, "continuous_torque_nm", where)
        if cont > peak:
            problems.add(
                f"Profile {where}: continuous_torque_nm ({cont}) exceeds peak_torque_nm ({peak})."
            )
        motor_keys = ("k_t_nm_per_a", "k_e_v_s_per_rad", "resistance_ohm", "bus_voltage_v")
        present = [k for k in motor_keys if k in t]
        motor = None
        if present and len(present) < len(motor_keys):
            missing = [k for k in motor_keys if k not in t]
            problems.add(
                f"Profile {where} gives some motor constants but not {', '.join(missing)}; "
                f"give all four or none."
            )
        elif present:
            motor = MotorConstants(
                k_t=problems.number(t, "k_t_nm_per_a", where),
                k_e=problems.number(t, "k_e_v_s_per_rad", where),
                resistance=problems.number(t, "resistance_ohm", where),
                bus_voltage=problems.number(t, "bus_voltage_v", where),
            )
        actuators.append(
            Actuator(
                name=act_name,
                role=role if role in ROLES else ROLES[0],
                side=side,
                peak_torque=peak,
                continuous_torque=cont,
                motor=motor,
                saturation_tol=problems.optional(t, "saturation_tol", where),
                saturation_eps=problems.optional(t, "saturation_eps_nm", where),
            )
        )
    sides = sorted(a.side for a in actuators if a.role == "wheel" and a.side)
    if acts_t and sides != ["l", "r"]:
        problems.add(
            f'Profile needs exactly one left and one right wheel actuator (role = "wheel"), '
            f"found sides {sides}."
        )
    thresholds_t = data.get("thresholds", {})
    thresholds = Thresholds.defaults()
    if not isinstance(thresholds_t, dict):
        problems.add("Profile [thresholds] must be a table of key = number.")
    else:
        try:
            thresholds = Thresholds.from_mapping(thresholds_t, where=f"{source} [thresholds]")
        except ThresholdsError as exc:
            problems.add(str(exc))
    if len(problems.found) == 1:
        raise ProfileError(problems.found[0])
    if problems.found:
        raise ProfileError(
            f"{source} has {len(problems.found)} problems; fix them all, then load it again: "
            + " | ".join(f"({i}) {m}" for i, m in enumerate(problems.found, 1))
        )
    return RobotProfile(
        name=name,
        wheel_radius=wheel_radius,
        track_width=track_width,
        mass=mass,
        com=com,
        wheel_encoder_reference=ref,
        actuators=tuple(actuators),
        thresholds=thresholds,
    )


def load_profile(path: str | Path) -> RobotProfile:
    """Read and check a robot profile TOML file.

    Raises :class:`ProfileError` with the missing or bad field and what to do.
    """
    p = Path(path)
    return profile_from_dict(_read_toml(p, ProfileError, "robot profile"), source=str(p))
