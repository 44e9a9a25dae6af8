"""Tests of the shared kinematics helpers (derivative, time weights, wheel/contact speeds)."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from analysis.kinematics import (
    column,
    contact_midpoint_speed,
    contact_speeds,
    derivative,
    lever_arm_rate,
    rim_speed,
    sample_weights,
    time_share,
    yaw_rate_from_wheels,
)


def _uneven_time(n: int = 400, seed: int = 1) -> np.ndarray:
    rng = np.random.default_rng(seed)
    return np.cumsum(rng.uniform(0.002, 0.004, n))


def test_derivative_matches_numpy_gradient_on_uneven_grid() -> None:
    t = _uneven_time()
    x = np.sin(3.0 * t) + 0.2 * t**2
    # Reference library: numpy.gradient (second-order central differences on an uneven grid,
    # first-order at the ends); tolerance is round-off only.
    assert derivative(t, x) == pytest.approx(np.gradient(x, t), rel=1e-9, abs=1e-9)


def test_derivative_exact_for_a_quadratic_inside() -> None:
    t = _uneven_time(50)
    x = 1.5 * t**2
    d = derivative(t, x)
    # Analytic: the three-point difference on an uneven grid is exact for polynomials of
    # degree 2 (Fornberg 1988), so d/dt(1.5 t^2) = 3 t up to round-off.
    assert d[1:-1] == pytest.approx(3.0 * t[1:-1], rel=1e-8)


def test_derivative_never_reaches_across_a_gap_or_nan() -> None:
    t = np.concatenate((np.arange(0, 1, 0.01), np.arange(2, 3, 0.01)))
    # A ramp of slope 1 that jumps by 100 while no data was logged.
    x = t + np.where(t >= 2, 100.0, 0.0)
    x[30] = np.nan
    d = derivative(t, x)
    assert np.isnan(d[30])
    # Analytic: slope of x = t is 1 everywhere; a difference across the gap would give ~100.
    assert d[~np.isnan(d)] == pytest.approx(np.ones(int((~np.isnan(d)).sum())), rel=1e-9)
    assert (~np.isnan(d)).sum() == t.size - 1


def test_sample_weights_and_time_share_leave_out_gaps() -> None:
    t = np.concatenate((np.arange(0, 1, 0.01), np.arange(3, 4, 0.01)))
    w = sample_weights(t)
    # 0.99 s logged in each stretch (zero-order hold; last sample of a stretch weighs 0).
    assert w.sum() == pytest.approx(1.98, rel=1e-9)
    mask = t < 0.5  # samples 0..49 -> 0.5 s of the 1.98 s logged
    # Arithmetic of the pattern: 0.5 s / 1.98 s.
    assert time_share(t, mask) == pytest.approx(0.5 / 1.98, rel=1e-9)
    valid = t < 1.5  # only the first stretch: 0.99 s valid
    assert time_share(t, mask, valid) == pytest.approx(0.5 / 0.99, rel=1e-9)
    assert time_share(np.array([0.0]), np.array([True])) is None


def test_column_reads_missing_values_as_nan() -> None:
    frame = pd.DataFrame({"t": [0.0, 0.1], "vel_x": pd.array([1.0, None], dtype="Float64")})
    x = column(frame, "vel_x")
    assert x is not None and x.dtype == np.float64 and np.isnan(x[1])
    assert column(frame, "roll") is None


def test_rim_speed_adds_pitch_rate_for_a_leg_referenced_encoder() -> None:
    # Worked number: r = 0.1 m, wheel 20 rad/s against its leg, leg pitching back at 2 rad/s:
    # ground-referenced wheel rate 18 rad/s, rim speed 1.8 m/s (v = r (w + q): angular rates
    # of bodies in plane motion add, Meriam & Kraige, Engineering Mechanics: Dynamics, ch. 5).
    assert rim_speed(np.array([20.0]), np.array([-2.0]), 0.1)[0] == pytest.approx(1.8)
    # Ground-referenced encoder: v = r w (rolling without slip, common practice, no source).
    assert rim_speed(np.array([20.0]), None, 0.1)[0] == pytest.approx(2.0)


def test_turn_in_place_gives_opposite_contact_speeds() -> None:
    v_l, v_r = contact_speeds(np.array([0.0]), np.array([1.2]), 0.5)
    # Differential drive (Siegwart et al. 2011, ch. 3): v = v_mid -/+ yaw_rate b / 2,
    # 1.2 rad/s * 0.5 m / 2 = 0.3 m/s.
    assert (v_l[0], v_r[0]) == pytest.approx((-0.3, 0.3))


def test_wheel_yaw_rate_differential_drive_worked_number() -> None:
    # Differential drive (Siegwart et al. 2011, ch. 3): r (w_R - w_L) / b
    # = 0.1 m * (12 - 8) rad/s / 0.5 m = 0.8 rad/s, positive turning left.
    assert yaw_rate_from_wheels(np.array([8.0]), np.array([12.0]), 0.1, 0.5)[0] == pytest.approx(
        0.8
    )


def test_lever_arm_of_a_leaned_turn_matches_the_rigid_body_cross_product() -> None:
    t = np.arange(0, 1, 0.01)
    n = t.size
    r, L, roll, yaw_rate, v_base = 0.1, 0.3, 0.2, 1.0, 2.0
    v_mid = contact_midpoint_speed(
        t,
        np.full(n, v_base),
        np.full(n, yaw_rate),
        r,
        leg_length=np.full(n, L),
        pitch=np.zeros(n),
        roll=np.full(n, roll),
    )
    # Rigid body (Meriam & Kraige, relative velocity): v_mid = v_base - omega x r_base, with the
    # base (r + L) above the contact line, tilted right by the roll: r_base = (0, -(r+L) sin
    # roll, (r+L) cos roll) in ISO 8855 axes (y left). Reference: numpy.cross.
    r_base = np.array([0.0, -(r + L) * np.sin(roll), (r + L) * np.cos(roll)])
    expected = v_base - np.cross([0.0, 0.0, yaw_rate], r_base)[0]
    assert v_mid == pytest.approx(np.full(n, expected), rel=1e-12)
    assert expected == pytest.approx(2.0 - 0.4 * np.sin(0.2))


def test_pitch_swing_of_the_base_is_removed() -> None:
    t = np.arange(0, 2, 0.001)
    L = 0.4
    pitch = 0.1 * np.sin(2.0 * t)
    q = 0.2 * np.cos(2.0 * t)  # the gyro's pitch rate, d/dt of the pitch above
    v_mid = contact_midpoint_speed(
        t,
        np.zeros(t.size),
        np.zeros(t.size),
        0.1,
        leg_length=np.full(t.size, L),
        pitch=pitch,
        pitch_rate=q,
    )
    # Analytic: base at L sin(pitch) ahead of the axle, so with the base still the contacts move
    # at -d/dt(L sin(pitch)) = -L cos(pitch) q (chain rule; L constant, so L' = 0 after the
    # low-pass of a constant). Tolerance: floating-point only.
    expected = -L * np.cos(pitch) * q
    assert v_mid == pytest.approx(expected, abs=1e-9)


def test_lever_arm_uses_the_gyro_not_the_derivative_of_the_attitude_estimate() -> None:
    t = np.arange(0, 2, 0.0025)  # 400 Hz
    L = 0.3
    pitch = 0.1 * np.sin(2.0 * t)
    q = 0.2 * np.cos(2.0 * t)
    # An attitude estimate with 0.2 deg of white noise (the upper figure)
    noisy = pitch + np.deg2rad(0.2) * np.random.default_rng(5).standard_normal(t.size)
    legs = np.full(t.size, L)
    zeros = np.zeros(t.size)
    clean = contact_midpoint_speed(t, zeros, zeros, 0.1, legs, pitch, pitch_rate=q)
    measured = contact_midpoint_speed(t, zeros, zeros, 0.1, legs, noisy, pitch_rate=q)
    # With the measured rate the noise enters only through L cos(pitch) q:
    # 0.3 m * 0.2 rad/s * (1 - cos(0.0035)) and sin terms, far below 1e-3 m/s.
    assert np.max(np.abs(measured - clean)) < 1e-3
    # Reference: the numerical derivative of the noisy estimate is 0.1 m/s of noise or more
    # (0.0035 rad * 0.3 m / (2 * 0.0025 s) * sqrt(2) / 2 ~ 0.15 m/s RMS), the slip floor.
    numeric = -np.gradient(L * np.sin(noisy), t)
    assert np.std(numeric - clean) > 0.1


def test_lever_arm_without_gyro_falls_back_to_the_low_passed_estimate() -> None:
    t = np.arange(0, 4, 0.0025)
    L = 0.3 + 0.02 * np.sin(1.5 * t)  # the leg moves too
    pitch = 0.1 * np.sin(2.0 * t)
    noisy = pitch + np.deg2rad(0.2) * np.random.default_rng(6).standard_normal(t.size)
    rate = lever_arm_rate(t, L, noisy, None)
    # Product rule: d/dt(L sin(pitch)) = L' sin(pitch) + L cos(pitch) pitch'
    exact = 0.03 * np.cos(1.5 * t) * np.sin(pitch) + L * np.cos(pitch) * 0.2 * np.cos(2.0 * t)
    inner = (t > 0.25) & (t < 3.75)  # away from the zero-phase filter's ends
    # The 10 Hz low-pass leaves about 0.01 m/s RMS of the 0.15 m/s raw derivative noise
    # (white noise power scales with the band: sqrt(10 / 200) * ~0.15 * 10 Hz slope); 0.03
    # bounds its peaks.
    assert np.max(np.abs(rate[inner] - exact[inner])) < 0.03
    with_gyro = lever_arm_rate(t, L, noisy, 0.2 * np.cos(2.0 * t))
    # With the gyro the leg-rate term is the only derivative, of a low-passed length.
    assert np.max(np.abs(with_gyro[inner] - exact[inner])) < 2e-3


def test_no_leg_length_means_no_lever_arm() -> None:
    v = contact_midpoint_speed(
        np.arange(3.0), np.array([1.0, 2.0, 3.0]), np.ones(3), 0.1, roll=np.full(3, 0.3)
    )
    assert list(v) == [1.0, 2.0, 3.0]
