"""Small synthetic course runs for the comparison tests (invented, not physics-accurate).

A course is a curvature profile against distance: the heading changes only with
distance travelled, so two runs at different speeds drive the same shape. The
derived series the comparison reads (roll error, tip-over margin, saturation,
slip speed) are set directly, so tests control them exactly.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from analysis import catalogue as cat
from analysis.compare.compare import RunData
from analysis.profile import RobotProfile, profile_from_dict

DT = 0.02  # s, 50 Hz keeps the runs small

PROFILE_DICT = {
    "robot": {
        "name": "Marram-2",
        "wheel_radius_m": 0.09,
        "track_width_m": 0.42,
        "mass_kg": 16.5,
        "wheel_encoder_reference": "leg",
    },
    "com": {"model": "constant", "height_m": 0.45},
    "actuators": {
        "wheel_l": {
            "role": "wheel",
            "side": "left",
            "peak_torque_nm": 8,
            "continuous_torque_nm": 3,
        },
        "wheel_r": {
            "role": "wheel",
            "side": "right",
            "peak_torque_nm": 8,
            "continuous_torque_nm": 3,
        },
    },
}


def profile() -> RobotProfile:
    """The invented test robot."""
    return profile_from_dict(PROFILE_DICT, source="compare tests")


def loop_curvature(s: np.ndarray) -> np.ndarray:
    """Curvature of the invented loop course at distance s: straights, left and right curves. [rad/m]"""
    p = np.mod(s, 120.0)
    k = np.zeros_like(p)
    k[(p >= 15) & (p < 30)] = 0.2  # left, radius 5 m
    k[(p >= 45) & (p < 55)] = -0.25  # right, radius 4 m
    k[(p >= 70) & (p < 95)] = 0.12  # long left
    k[(p >= 105) & (p < 112)] = -0.3
    return k


def hill_curvature(s: np.ndarray) -> np.ndarray:
    """A different invented course: gentle S-bends with another rhythm. [rad/m]"""
    return 0.15 * np.sin(2 * np.pi * s / 23.0) * (np.mod(s, 60.0) < 35)


def make_run(
    run_id: str,
    *,
    speed: float = 1.5,
    seed: int = 0,
    skip_m: float = 0.0,
    length_m: float = 120.0,
    extra_roll_error: float = 0.0,
    curvature=loop_curvature,
    course: str | None = "gullhaven-loop",
    controller: str = "lean-ctl 1.4",
) -> RunData:
    """One synthetic run starting ``skip_m`` metres into the course.

    Parameters
    ----------
    speed : float
        Mean forward speed; a slow sinusoid of 0.3 m/s rides on it. [m/s]
    seed : int
        Noise seed.
    skip_m : float
        Course position of the run's first sample. [m]
    length_m : float
        Distance driven. [m]
    extra_roll_error : float
        Constant added to the roll error (roll reduced by it). [rad]
    """
    rng = np.random.default_rng(seed)
    t_end = length_m / speed * 1.2
    t = np.arange(0.0, t_end, DT)
    v = speed + 0.3 * np.sin(2 * np.pi * t / 17.0 + seed)
    s = np.concatenate(([0.0], np.cumsum(0.5 * (v[1:] + v[:-1]) * DT)))
    keep = s <= length_m
    t, v, s = t[keep], v[keep], s[keep]
    kappa = curvature(s + skip_m)
    yaw_rate = kappa * v + rng.normal(0.0, 0.005, t.size)
    roll_ref = np.arctan(v * v * kappa / cat.G0)
    err = 0.01 * rng.standard_normal(t.size) + extra_roll_error
    torque_l = 1.0 + 0.5 * np.sin(t) + 0.1 * rng.standard_normal(t.size)
    torque_r = 1.0 + 0.5 * np.cos(t) + 0.1 * rng.standard_normal(t.size)
    frame = pd.DataFrame(
        {
            cat.T: t,
            cat.VEL_X: v,
            cat.YAW_RATE: yaw_rate,
            cat.ROLL_REF: roll_ref,
            cat.ROLL: roll_ref - err,
            "wheel_l.torque": torque_l,
            "wheel_r.torque": torque_r,
            "wheel_l.vel": v / 0.09,
            "wheel_r.vel": v / 0.09,
        }
    )
    series = pd.DataFrame(
        {
            cat.T: t,
            cat.ROLL_ERROR: err,
            cat.TIP_MARGIN: 1.0 - 1.5 * np.abs(kappa) + 0.02 * rng.standard_normal(t.size),
            "wheel_l.saturated": (np.abs(kappa) > 0.22).astype(float),
            "wheel_r.saturated": np.zeros(t.size),
            "wheel_l.slip_speed": 0.03 * rng.standard_normal(t.size),
            "wheel_r.slip_speed": 0.03 * rng.standard_normal(t.size),
        }
    )
    meta = {"name": run_id, "controller": controller}
    if course:
        meta["course"] = course
    return RunData(run_id, frame, series, [], profile(), meta)
