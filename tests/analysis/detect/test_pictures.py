"""Tests of the course map, the actuator envelope and the calibration check."""

from __future__ import annotations

from dataclasses import replace

import numpy as np
import pandas as pd
import pytest

from analysis import catalogue as cat
from analysis.detect.calibrate import calibrate
from analysis.detect.course_map import course_path, dead_reckon, thin_indices
from analysis.detect.envelope import actuator_envelope, limit_lines, operating_density
from analysis.profile import Actuator, ComModel, MotorConstants, RobotProfile

MOTOR = MotorConstants(k_t=0.5, k_e=0.5, resistance=1.0, bus_voltage=24.0)


def _profile(r: float = 0.1, b: float = 0.44, motor: MotorConstants | None = None) -> RobotProfile:
    return RobotProfile(
        name="Marram-2",
        wheel_radius=r,
        track_width=b,
        mass=20.0,
        com=ComModel("constant", height=0.5),
        wheel_encoder_reference="ground",
        actuators=(
            Actuator("wheel_l", "wheel", "l", peak_torque=10.0, continuous_torque=4.0, motor=motor),
            Actuator("wheel_r", "wheel", "r", peak_torque=10.0, continuous_torque=4.0, motor=motor),
        ),
    )


# --- course map ------------------------------------------------------------------------------


@pytest.mark.parametrize("use_yaw_estimate", [False, True])
def test_a_circle_closes_after_two_pi_r(use_yaw_estimate: bool) -> None:
    # Closed form: a circle of radius R driven at speed v takes T = 2 pi R / v, has length
    # 2 pi R and ends where it started (uniform circular motion, any mechanics text).
    R, v, dt = 5.0, 1.5, 0.0025
    T = 2 * np.pi * R / v
    t = np.arange(0.0, T + dt / 2, dt)
    t[-1] = T
    yaw_rate = np.full(len(t), v / R)
    yaw = np.angle(np.exp(1j * (0.3 + v / R * t)))  # an estimate wrapped to (-pi, pi]
    x, y, psi, dist = dead_reckon(
        t, np.full(len(t), v), yaw=yaw if use_yaw_estimate else None, yaw_rate=yaw_rate
    )
    # Trapezoid integration of a circle: position error O(dt^2) per unit time, here well
    # below 1 mm; distance of a constant speed is exact to rounding.
    assert dist[-1] == pytest.approx(2 * np.pi * R, rel=1e-9)
    assert np.hypot(x[-1], y[-1]) < 1e-3
    # Left turn (positive yaw rate, ISO 8855): the circle's centre is at (0, R).
    assert np.max(y) == pytest.approx(2 * R, rel=1e-4)
    assert psi[-1] == pytest.approx(2 * np.pi, rel=1e-9)


def test_a_gap_adds_no_motion_and_the_wheels_stand_in_for_vel_x() -> None:
    t = np.arange(0, 10.0, 0.01)
    rate = np.full(len(t), 10.0)  # rad/s -> 1 m/s with r = 0.1 m, straight
    frame = pd.DataFrame(
        {
            cat.T: t,
            cat.YAW_RATE: np.zeros(len(t)),
            "wheel_l.vel": rate,
            "wheel_r.vel": rate,
        }
    )
    path = course_path(frame, _profile())
    assert path is not None and path.speed_source == "wheels"
    # Straight at 1 m/s for 9.99 s: x = 9.99 m, y = 0 (by construction of the input).
    assert path.x[-1] == pytest.approx(9.99, rel=1e-9)
    assert np.max(np.abs(path.y)) == 0.0
    frame.loc[100:199, "wheel_l.vel"] = np.nan  # one second lost: that wheel counts 0 there
    path = course_path(frame, _profile())
    assert path is not None and path.x[-1] < 9.99


def test_no_heading_gives_no_map() -> None:
    frame = pd.DataFrame({cat.T: [0.0, 0.1], cat.VEL_X: [1.0, 1.0]})
    assert course_path(frame, _profile()) is None


def test_thin_indices_keep_both_ends() -> None:
    idx = thin_indices(100_000, 1000)
    assert len(idx) <= 1000 and idx[0] == 0 and idx[-1] == 99_999
    assert list(thin_indices(5, 1000)) == [0, 1, 2, 3, 4]


# --- actuator envelope -------------------------------------------------------------------------


def test_density_puts_each_point_in_its_cell() -> None:
    # Hand-placed points on a 4 x 4 grid over [-2, 2] x [-4, 4]: cells are 1 rad/s x 2 N*m.
    speed = np.array([-1.5, -1.5, 0.5, 1.5, np.nan])
    torque = np.array([-3.0, -3.0, 1.0, 3.0, 0.0])
    share, s_edges, q_edges = operating_density(
        speed, torque, speed_range=(-2, 2), torque_range=(-4, 4), bins=4
    )
    assert list(s_edges) == [-2, -1, 0, 1, 2] and list(q_edges) == [-4, -2, 0, 2, 4]
    assert share[0, 0] == pytest.approx(0.5)  # two of four valid points
    assert share[2, 2] == pytest.approx(0.25)
    assert share[3, 3] == pytest.approx(0.25)
    assert share.sum() == pytest.approx(1.0)


def test_limit_lines_follow_the_dc_motor_in_both_quadrants() -> None:
    act = Actuator("wheel_l", "wheel", "l", peak_torque=100.0, continuous_torque=5.0, motor=MOTOR)
    lines = limit_lines(act, 24.0)
    w = lines["speed"]
    i_pos = int(np.argmin(np.abs(w - 24.0)))
    i_neg = int(np.argmin(np.abs(w + 24.0)))
    # DC motor equations (Hughes & Drury, Electric Motors and Drives, ch. 3), hand-computed:
    # motoring at +24 rad/s: k_t (V - k_e w) / R = 0.5 (24 - 12) / 1 = 6 N*m;
    # braking with positive torque at -24 rad/s: k_t (V + k_e |w|) / R = 0.5 * 36 = 18 N*m.
    assert lines["upper"][i_pos] == pytest.approx(6.0)
    assert lines["upper"][i_neg] == pytest.approx(18.0)
    # Mirror image for negative torque: motoring at -24 rad/s gives -6, braking at +24 gives -18.
    assert lines["lower"][i_neg] == pytest.approx(-6.0)
    assert lines["lower"][i_pos] == pytest.approx(-18.0)


def test_envelope_marks_saturated_points_in_the_window() -> None:
    t = np.arange(0, 2.0, 0.01)
    frame = pd.DataFrame(
        {
            cat.T: t,
            "wheel_l.vel": np.linspace(-5, 5, len(t)),
            "wheel_l.torque_cmd": np.full(len(t), 2.0),
        }
    )
    sat = t >= 1.5
    act = _profile().actuators[0]
    env = actuator_envelope(frame, act, saturated=sat, t0=1.0, t1=2.0)
    assert env is not None and env["torque_source"] == "wheel_l.torque_cmd"
    assert env["samples"] == 100  # t = 1.00 .. 1.99
    assert len(env["saturated_points"]["speed"]) == 50
    assert min(env["saturated_points"]["speed"]) > 2.4  # only t >= 1.5 (speed 2.5 rad/s up)
    assert env["peak_abs_torque"] == 2.0 and env["share_above_continuous"] == 0.0
    assert actuator_envelope(frame.drop(columns="wheel_l.vel"), act) is None


# --- calibration check -------------------------------------------------------------------------


def _drive(r_true: float, b_true: float, bias: float, tilt: float, seed: int = 3) -> pd.DataFrame:
    """Stand 20 s, straight 20 s at 1.2 m/s, turn left 20 s (0.6 rad/s), turn right 20 s."""
    rng = np.random.default_rng(seed)
    dt = 0.005
    t = np.arange(0, 80.0, dt)
    v = np.where(t < 20, 0.0, 1.2)
    yaw_rate = np.select([t < 40, t < 60], [0.0, 0.6], -0.6)
    yaw_rate = np.where(t < 20, 0.0, yaw_rate)
    w_l = (v - yaw_rate * b_true / 2) / r_true  # differential drive, ground-referenced encoders
    w_r = (v + yaw_rate * b_true / 2) / r_true
    n = len(t)
    g = 9.80665
    pitch_true = np.full(n, 0.02)
    return pd.DataFrame(
        {
            cat.T: t,
            cat.VEL_X: v + rng.normal(0, 0.02, n),
            cat.YAW_RATE: yaw_rate + bias + rng.normal(0, 0.01, n),
            cat.PITCH_RATE: rng.normal(0, 0.01, n),
            cat.ROLL_RATE: rng.normal(0, 0.01, n),
            "wheel_l.vel": np.round(w_l / 0.01) * 0.01,  # encoder quantisation 0.01 rad/s
            "wheel_r.vel": np.round(w_r / 0.01) * 0.01,
            cat.PITCH: pitch_true + tilt,
            cat.ROLL: np.zeros(n),
            cat.ACCEL_X: -g * np.sin(pitch_true) + rng.normal(0, 0.05, n),
            cat.ACCEL_Y: rng.normal(0, 0.05, n),
            cat.ACCEL_Z: g * np.cos(pitch_true) + rng.normal(0, 0.05, n),
        }
    )


def test_calibration_recovers_radius_track_bias_and_tilt_from_a_wrong_profile() -> None:
    frame = _drive(r_true=0.105, b_true=0.48, bias=np.deg2rad(1.0), tilt=np.deg2rad(2.0))
    result = calibrate(frame, _profile(r=0.100, b=0.44))
    by_key = {e.key: e for e in result.estimates}
    # The inputs were built with r = 0.105 m and b = 0.48 m; noise of 0.02 m/s on 4000
    # straight samples moves the radius fit by well under 0.5 %.
    assert by_key["wheel_radius"].estimate == pytest.approx(0.105, rel=0.005)
    assert by_key["wheel_radius"].differs is True  # 5 % off the profile's 0.100 m
    # The yaw-rate bias (1 deg/s) is in the gyro but not in the wheels: the track fit is off by
    # about bias / yaw_rate = 0.0175 / 0.6 = 3 % per turn direction, and the two directions
    # cancel to second order; 1 % covers it.
    assert by_key["track_width"].estimate == pytest.approx(0.48, rel=0.01)
    assert by_key["gyro_bias_yaw"].estimate == pytest.approx(np.deg2rad(1.0), abs=np.deg2rad(0.05))
    assert by_key["gyro_bias_yaw"].differs is True
    assert by_key["gyro_bias_roll"].differs is False
    assert by_key["accel_tilt_pitch"].estimate == pytest.approx(
        np.deg2rad(2.0), abs=np.deg2rad(0.1)
    )
    assert by_key["accel_tilt_roll"].differs is False
    fixed = result.corrected_profile()
    assert fixed["wheel_radius_m"] == pytest.approx(0.105, rel=0.005)
    assert fixed["track_width_m"] == pytest.approx(0.48, rel=0.01)


def test_calibration_of_a_right_profile_flags_nothing() -> None:
    frame = _drive(r_true=0.1, b_true=0.44, bias=0.0, tilt=0.0)
    result = calibrate(frame, _profile(r=0.1, b=0.44))
    assert [e.key for e in result.estimates if e.differs] == []
    assert result.corrected_profile() == {}


def test_calibration_without_standstill_says_so() -> None:
    frame = _drive(0.1, 0.44, 0.0, 0.0)
    frame = frame[frame[cat.T] >= 20].reset_index(drop=True)
    by_key = {e.key: e for e in calibrate(frame, _profile()).estimates}
    assert by_key["gyro_bias_yaw"].estimate is None
    assert "standstill" in by_key["gyro_bias_yaw"].note


def test_calibration_is_against_the_profile_not_the_run() -> None:
    # The same run checked against a profile with the right radius but a track 20 % wide.
    frame = _drive(0.1, 0.44, 0.0, 0.0)
    wide = replace(_profile(), track_width=0.528)
    by_key = {e.key: e for e in calibrate(frame, wide).estimates}
    assert by_key["track_width"].differs is True
    assert by_key["wheel_radius"].differs is False


def test_calibration_recovers_the_demo_generators_values_from_a_wrong_profile() -> None:
    from analysis.demo.logs import demo_profile, simulate_run

    truth = demo_profile()  # the generator simulates Marram-2 with these values
    run = simulate_run(seed=5)
    wrong = replace(
        truth, wheel_radius=truth.wheel_radius * 1.08, track_width=truth.track_width * 0.9
    )
    by_key = {e.key: e for e in calibrate(run.frame, wrong).estimates}
    # Bounds: 1 % on the radius (velocity-estimate noise and lag average out over the
    # straights), 2 % on the track (curves are short; the lever-arm of a leaning body adds
    # a little); both far inside the 8 % and 10 % planted errors.
    assert by_key["wheel_radius"].estimate == pytest.approx(truth.wheel_radius, rel=0.01)
    assert by_key["track_width"].estimate == pytest.approx(truth.track_width, rel=0.02)
    assert by_key["wheel_radius"].differs and by_key["track_width"].differs
