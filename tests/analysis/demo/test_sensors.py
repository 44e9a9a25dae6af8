"""The demo generator's sensor model: each effect is there, with the size its docstring gives.

Inputs are synthetic true signals, so each effect is measured alone. Tolerances are
statistical: with N independent samples an RMS estimate is good to about 1/sqrt(2N).
"""

from __future__ import annotations

from dataclasses import replace

import numpy as np
import pytest

from analysis import catalogue as cat
from analysis.demo.logs import simulate_run
from analysis.demo.sensors import SensorModel, measure_state, measure_torque, stamp_and_drop

DT = 0.005  # s, the demo state period (200 Hz)
N = 40_000  # 200 s
MODEL = SensorModel()

STATE_KEYS = (
    "roll",
    "pitch",
    "yaw",
    "roll_rate",
    "pitch_rate",
    "yaw_rate",
    "accel_x",
    "accel_y",
    "accel_z",
    "vel_x",
    "vel_y",
    "leg_l.length",
    "leg_r.length",
    "wheel_l.vel",
    "wheel_r.vel",
    "hip_l.pos",
    "hip_r.pos",
)


def _still(n: int = N) -> dict[str, np.ndarray]:
    true = {k: np.zeros(n) for k in STATE_KEYS}
    true["accel_z"] = np.full(n, 9.80665)
    true["leg_l.length"] = true["leg_r.length"] = np.full(n, 0.34)
    return true


def _measure(true, speed=None, model=MODEL, seed=1):
    n = next(iter(true.values())).size
    speed = np.zeros(n) if speed is None else speed
    return measure_state(true, speed, speed / 0.1, DT, seed, model)


def test_attitude_estimate_has_white_noise_and_slow_drift():
    out = _measure(_still())
    err = np.rad2deg(out["roll"])
    # white part: a first difference of white noise has sqrt(2) times its RMS; the drift
    # (20 s time constant) barely moves in 5 ms. 0.1 deg stated; 5 % tolerance (N = 40,000).
    assert np.std(np.diff(err)) / np.sqrt(2) == pytest.approx(0.1, rel=0.05)
    # total: sqrt(0.1^2 + 0.3^2) = 0.32 deg stated; only ~10 drift time constants in the run,
    # so the drift's RMS is known to about a factor 2.
    assert 0.15 < np.std(err) < 0.65


def test_gyro_has_white_noise_and_a_bias_per_run():
    out = _measure(_still())
    rate = np.rad2deg(out["pitch_rate"])
    assert np.std(rate) == pytest.approx(0.1, rel=0.05)  # 0.1 deg/s stated
    biases = [np.rad2deg(_measure(_still(200), seed=s)["yaw_rate"].mean()) for s in range(60)]
    # bias drawn with 0.2 deg/s RMS; 60 draws estimate it to about +-20 %, noise mean adds 0.007
    assert np.std(biases) == pytest.approx(0.2, rel=0.3)


def test_accelerometer_vibration_grows_with_speed():
    still = _measure(_still())
    assert np.std(still["accel_x"]) == pytest.approx(0.02, rel=0.05)  # white noise only
    moving = _measure(_still(), speed=np.full(N, 2.0))
    # at 2 m/s: tone 0.15 * 2 / sqrt(2) = 0.212 RMS, broadband hypot(0.02, 0.08 * 2) = 0.161
    expected = np.hypot(0.15 * 2.0 / np.sqrt(2.0), np.hypot(0.02, 0.16))
    assert np.std(moving["accel_x"]) == pytest.approx(expected, rel=0.05)
    assert np.mean(moving["accel_z"]) == pytest.approx(9.80665, abs=0.01)


def test_velocity_estimate_lags_like_a_first_order_filter():
    true = _still(1000)
    true["vel_x"] = np.where(np.arange(1000) * DT >= 1.0, 1.0, 0.0)
    out = _measure(true, model=replace(MODEL, velocity_noise=0.0))
    k0 = int(round(1.0 / DT))
    # First-order lag, discretised exactly for an input held over each step: m steps after
    # the step began the output has come 1 - exp(-(m + 1) dt / tau) of the way
    # (step response of a first-order system, e.g. Dorf & Bishop, Modern Control Systems).
    for m in (0, 3, 10):
        expected = 1.0 - np.exp(-(m + 1) * DT / MODEL.velocity_lag_s)
        assert out["vel_x"][k0 + m] == pytest.approx(expected, abs=1e-9)
    noisy = _measure(_still())
    assert np.std(noisy["vel_x"]) == pytest.approx(0.02, rel=0.05)


def test_wheel_speed_is_a_quantised_encoder_difference():
    true = _still(2000)
    true["wheel_l.vel"] = np.full(2000, 10.3)
    out = _measure(true)
    step = 2.0 * np.pi / 4096 / DT  # one count per period: 0.307 rad/s
    counts = out["wheel_l.vel"] / step
    assert np.allclose(counts, np.round(counts), atol=1e-6)
    assert set(np.unique(np.round(counts))) == {33.0, 34.0}  # 10.3 / 0.307 = 33.6
    assert np.mean(out["wheel_l.vel"]) == pytest.approx(10.3, rel=1e-3)


def test_time_stamps_jitter_and_rows_drop():
    t = np.arange(200_000) * DT
    stamps, keep = stamp_and_drop(t, DT, seed=3, channel=0, model=MODEL)
    assert np.std(stamps - t) == pytest.approx(50e-6, rel=0.05)  # 50 us stated
    assert np.all(np.diff(stamps) > 0)  # clipped at a fifth of the period: order kept
    dropped = int((~keep).sum())
    # 1 in 2000 of 200,000 rows: 100 expected, Poisson sd 10
    assert 70 <= dropped <= 130
    assert keep[0] and keep[-1]


def test_measured_torque_is_noisy_and_lags_the_command():
    cmd = np.where(np.arange(4000) * DT >= 1.0, 2.0, 0.0)
    quiet = measure_torque(cmd, 3.0, DT, 1, 0, replace(MODEL, torque_noise_share=0.0))
    k0 = int(round(1.0 / DT))
    # the 5 ms current loop as a first-order lag (exact discretisation, as for the velocity)
    for m in (0, 1, 5):
        expected = 2.0 * (1.0 - np.exp(-(m + 1) * DT / MODEL.torque_lag_s))
        assert quiet[k0 + m] == pytest.approx(expected, abs=1e-9)
    noisy = measure_torque(np.zeros(40_000), 3.0, DT, 1, 0, MODEL)
    assert np.std(noisy) == pytest.approx(0.015 * 3.0, rel=0.05)  # 1.5 % of the peak


def test_ideal_model_passes_the_true_states():
    true = _still(500)
    true["roll"] = np.linspace(0, 0.1, 500)
    true["wheel_l.vel"] = np.full(500, 10.3)
    out = _measure(true, speed=np.full(500, 1.0), model=SensorModel.ideal())
    for key in STATE_KEYS:
        assert np.array_equal(out[key], true[key]), key
    stamps, keep = stamp_and_drop(np.arange(500) * DT, DT, 1, 0, SensorModel.ideal())
    assert keep.all() and np.array_equal(stamps, np.arange(500) * DT)


def test_demo_runs_use_the_model_by_default():
    noisy = simulate_run("lean-ctl 2.0", seed=4, duration_s=20.0)
    ideal = simulate_run("lean-ctl 2.0", seed=4, duration_s=20.0, sensors=SensorModel.ideal())
    assert len(ideal.frame) == 4001  # 20 s at 200 Hz, nothing dropped
    # Default: the logged roll is the true roll plus the estimate's error (tenths of a degree)
    m = min(len(noisy.frame), len(ideal.frame))
    diff = np.rad2deg(noisy.frame[cat.ROLL][:m].to_numpy() - ideal.frame[cat.ROLL][:m].to_numpy())
    assert np.std(np.diff(diff)) > 0.05

    # measured torque: the command plus current-sense noise; ideal sensors log the command
    def measured_minus_cmd(run):
        f = run.frame
        return f["wheel_l.torque"].to_numpy() - f["wheel_l.torque_cmd"].to_numpy()

    assert np.nanstd(measured_minus_cmd(noisy)) > 0.02  # 1.5 % of 3 N*m = 0.045 RMS and lag
    assert np.nanmax(np.abs(measured_minus_cmd(ideal))) < 1e-3  # the files' rounding only
