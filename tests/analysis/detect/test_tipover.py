"""Tests of the lateral tip-over margin (analysis.detect.tipover) against published relations."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from scipy import signal as sps

from analysis import catalogue as cat
from analysis.detect.tipover import (
    METHOD_FALLBACK,
    detect_tip_margin,
    heading_specific_force,
    load_transfer_ratio,
    static_stability_factor,
    tip_margin,
    zmp_lateral,
)
from analysis.metrics import lowpass_zero_phase
from analysis.profile import RobotProfile, profile_from_dict

G = 9.80665  # m/s², standard gravity, ISO 80000-3 (typed here, not imported)
TRACK = 0.40  # m, invented robot
COM_HEIGHT = 0.50  # m, invented robot


def _profile(com: dict[str, object] | None = None) -> RobotProfile:
    wheel = {"peak_torque_nm": 10.0, "continuous_torque_nm": 5.0, "role": "wheel"}
    return profile_from_dict(
        {
            "robot": {
                "name": "Marram-2",
                "wheel_radius_m": 0.1,
                "track_width_m": TRACK,
                "mass_kg": 20.0,
                "wheel_encoder_reference": "leg",
            },
            "com": com or {"model": "constant", "height_m": COM_HEIGHT},
            "actuators": {
                "wheel_l": {**wheel, "side": "left"},
                "wheel_r": {**wheel, "side": "right"},
            },
        }
    )


def _frame(n: int, cols: dict[str, np.ndarray], dt: float = 0.01) -> pd.DataFrame:
    return pd.DataFrame({cat.T: np.arange(n) * dt, **cols})


def _body_reading(f_heading: tuple[float, float, float], roll: float, pitch: float) -> np.ndarray:
    """Body-frame specific force for a heading-frame one, by explicit rotation matrices.

    Body to heading is Ry(pitch) Rx(roll) (ISO 8855 axes: roll positive right side
    down is a right-hand rotation about x forward, pitch positive nose down is a
    right-hand rotation about y left); heading to body is its transpose.
    """
    c, s = np.cos(roll), np.sin(roll)
    rx = np.array([[1.0, 0.0, 0.0], [0.0, c, -s], [0.0, s, c]])
    c, s = np.cos(pitch), np.sin(pitch)
    ry = np.array([[c, 0.0, s], [0.0, 1.0, 0.0], [-s, 0.0, c]])
    return (ry @ rx).T @ np.asarray(f_heading, dtype=float)


# --- pure formulas ----------------------------------------------------------------


def test_margin_is_zero_at_the_static_stability_factor() -> None:
    # Upright (roll 0), lateral specific force a_y = g * b / (2 L_c) = 0.4 g.
    a_y = 0.4 * G
    y = zmp_lateral(COM_HEIGHT, 0.0, a_y, G)
    # NHTSA rollover resistance rating: an upright rigid body tips at a_y/g = SSF = b/(2 L_c)
    assert tip_margin(y, TRACK) == pytest.approx(0.0, abs=1e-12)
    # NHTSA: SSF = T / (2 H) = 0.40 / (2 * 0.50) = 0.4
    assert static_stability_factor(TRACK, COM_HEIGHT) == pytest.approx(0.4, rel=1e-12)


def test_steady_turn_lean_gives_margin_one() -> None:
    v, radius = 2.0, 3.0  # m/s, m; turning left
    # Cossalter, Motorcycle Dynamics: tan(phi) = v^2 / (g R), leaning into the turn
    # (into a left turn = left side down = negative roll in ISO 8855).
    phi = -np.arctan(v**2 / (G * radius))
    f_y = v**2 / radius  # centripetal acceleration to the left, specific force to the left
    y = zmp_lateral(COM_HEIGHT, phi, f_y, G)
    # Steady-turn lean (Cossalter): the ZMP stays on the centre line, margin 1
    assert tip_margin(y, TRACK) == pytest.approx(1.0, abs=1e-12)


@pytest.mark.parametrize(
    ("roll", "f_y", "f_z"),
    [(0.0, 2.0, G), (0.1, 2.0, 9.0), (-0.2, -1.5, 10.5), (0.15, -3.0, G)],
)
def test_margin_equals_one_minus_load_transfer_ratio(roll: float, f_y: float, f_z: float) -> None:
    mass, b, L_c = 30.0, TRACK, COM_HEIGHT
    # Point mass at (y_c, z_c); contacts at y = +b/2 (left) and -b/2 (right), z = 0.
    y_c, z_c = -L_c * np.sin(roll), L_c * np.cos(roll)
    force = mass * np.array([f_y, f_z])  # total contact force on the robot (y, z)

    def moment(r: np.ndarray, f: np.ndarray) -> float:  # moment about x of f applied at r
        return float(r[0] * f[1] - r[1] * f[0])

    # Moment balance about each contact (a point mass has no angular momentum): the
    # contact forces' moment equals that of the resultant applied at the CoM.
    left, right, com = np.array([b / 2, 0.0]), np.array([-b / 2, 0.0]), np.array([y_c, z_c])
    F_right = moment(com - left, force) / moment(right - left, np.array([0.0, 1.0]))
    F_left = moment(com - right, force) / moment(left - right, np.array([0.0, 1.0]))
    # Statics check: the two normal loads carry the vertical force.
    assert F_left + F_right == pytest.approx(mass * f_z, rel=1e-12)
    ltr_hand = (F_right - F_left) / (F_right + F_left)
    # Odenthal, Bünte & Ackermann (ECC 1999): LTR = (F_R - F_L) / (F_R + F_L)
    assert load_transfer_ratio(F_left, F_right) == pytest.approx(ltr_hand, rel=1e-12)
    y = zmp_lateral(L_c, roll, f_y, f_z)
    # Odenthal et al.: margin 1 - |LTR| from the statics wheel loads
    assert tip_margin(y, b) == pytest.approx(1.0 - abs(ltr_hand), abs=1e-12)


def test_accelerometer_at_rest_rolled_gives_no_lateral_force() -> None:
    phi = 0.3  # rad, right side down
    # Hand derivation (module docstring): right side down tilts the body's left axis
    # up, so the sensor at rest reads (0, g sin(phi), g cos(phi)).
    f_x, f_y, f_z = heading_specific_force(0.0, G * np.sin(phi), G * np.cos(phi), phi, 0.0)
    # At rest the heading-frame specific force is g straight up (definition of
    # specific force, ISO 8855 axes); 1e-12 is float rounding.
    assert (float(f_x), float(f_y), float(f_z)) == pytest.approx((0.0, 0.0, G), abs=1e-12)


def test_accelerometer_at_rest_rolled_and_pitched() -> None:
    phi, theta = -0.25, 0.4
    # Tilt-sensing relation at rest (common practice, no source):
    # (-g sin(theta), g sin(phi) cos(theta), g cos(phi) cos(theta))
    reading = (
        -G * np.sin(theta),
        G * np.sin(phi) * np.cos(theta),
        G * np.cos(phi) * np.cos(theta),
    )
    assert _body_reading((0.0, 0.0, G), phi, theta) == pytest.approx(reading, abs=1e-12)
    f = heading_specific_force(*reading, phi, theta)
    # At rest: specific force g straight up in the heading frame; float rounding only.
    assert [float(v) for v in f] == pytest.approx([0.0, 0.0, G], abs=1e-12)


def test_zmp_undefined_near_free_fall() -> None:
    y = zmp_lateral(COM_HEIGHT, 0.0, 1.0, 0.5)
    # With almost no vertical contact force there is no ZMP (common practice, no source).
    assert np.isnan(y)


# --- the zero-phase low-pass ----------------------------------------------------------


def _amplitude_phase(t: np.ndarray, x: np.ndarray, freq: float) -> tuple[float, float]:
    """Least-squares amplitude and phase of a sine of known frequency."""
    basis = np.column_stack((np.sin(2 * np.pi * freq * t), np.cos(2 * np.pi * freq * t)))
    (a, b), *_ = np.linalg.lstsq(basis, x, rcond=None)
    return float(np.hypot(a, b)), float(np.arctan2(b, a))


def test_lowpass_gain_at_cutoff_matches_freqz_squared() -> None:
    fs, fc = 200.0, 5.0
    t = np.arange(0.0, 20.0, 1.0 / fs)
    y = lowpass_zero_phase(t, np.sin(2 * np.pi * fc * t), fc)
    sos = sps.butter(2, fc, fs=fs, output="sos")
    _, h = sps.sosfreqz(sos, worN=[fc], fs=fs)
    mid = (t > 5.0) & (t < 15.0)  # away from the edge transients
    amp, _ = _amplitude_phase(t[mid], y[mid], fc)
    # scipy.signal.sosfreqz: forward-backward filtering has gain |H(fc)|^2; 1e-3 covers
    # the residual edge transient in the fitted window.
    assert amp == pytest.approx(abs(h[0]) ** 2, abs=1e-3)
    # Butterworth definition: |H(fc)| = 1/sqrt(2), so the gain squared is 1/2
    assert amp == pytest.approx(0.5, abs=1e-3)


def test_lowpass_keeps_phase_of_delayed_sine() -> None:
    fs, freq, delay = 200.0, 1.0, 0.137  # Hz, Hz, s
    t = np.arange(0.0, 20.0, 1.0 / fs)
    x = np.sin(2 * np.pi * freq * (t - delay))
    mid = (t > 5.0) & (t < 15.0)
    _, phase_in = _amplitude_phase(t[mid], x[mid], freq)
    _, phase_out = _amplitude_phase(t[mid], lowpass_zero_phase(t, x, 5.0)[mid], freq)
    # Zero-phase forward-backward filtering (Gustafsson 1996): no phase shift;
    # 1e-4 rad is fit noise.
    assert phase_out == pytest.approx(phase_in, abs=1e-4)
    causal = sps.sosfilt(sps.butter(2, 5.0, fs=fs, output="sos"), x)
    _, phase_causal = _amplitude_phase(t[mid], causal[mid], freq)
    # The check can fail: a one-way Butterworth does lag (phase of H at 1 Hz, scipy.signal).
    _, h = sps.sosfreqz(sps.butter(2, 5.0, fs=fs, output="sos"), worN=[freq], fs=fs)
    assert phase_causal - phase_in == pytest.approx(np.angle(h[0]), abs=1e-3)
    assert abs(phase_causal - phase_in) > 0.1


def test_lowpass_does_not_smear_across_a_data_gap_and_keeps_nan() -> None:
    t = np.concatenate((np.arange(0.0, 2.0, 0.01), np.arange(5.0, 7.0, 0.01)))
    x = np.where(t < 3.0, 0.0, 5.0)
    x[50:53] = np.nan
    y = lowpass_zero_phase(t, x, 5.0)
    # Filtering each gap-free stretch alone: a constant stays constant (filter DC gain 1,
    # scipy.signal.butter); 1e-9 is rounding in sosfiltfilt.
    assert np.nanmax(np.abs(y[t < 3.0])) == pytest.approx(0.0, abs=1e-9)
    assert y[t > 3.0] == pytest.approx(np.full(int((t > 3.0).sum()), 5.0), abs=1e-9)
    # NaN samples stay NaN (nothing invented where nothing was logged).
    assert np.isnan(y[50:53]).all() and np.isfinite(np.delete(y, [50, 51, 52])).all()


def test_lowpass_on_a_run_shorter_than_the_padding() -> None:
    t = np.arange(5) * 0.01
    y = lowpass_zero_phase(t, np.full(5, 2.0), 5.0)
    # A constant passes unchanged (DC gain 1), even with reduced padding.
    assert y == pytest.approx(np.full(5, 2.0), abs=1e-9)


# --- the detector ------------------------------------------------------------------


def test_detector_margin_zero_at_static_stability_factor() -> None:
    n = 300
    frame = _frame(
        n,
        {
            cat.ROLL: np.zeros(n),
            cat.PITCH: np.zeros(n),
            cat.ACCEL_X: np.zeros(n),
            cat.ACCEL_Y: np.full(n, 0.4 * G),
            cat.ACCEL_Z: np.full(n, G),
        },
    )
    res = detect_tip_margin(frame, _profile())
    assert res.skipped is None
    # NHTSA SSF = b/(2 L_c) = 0.4: at a_y = 0.4 g the margin is 0 (filter of a
    # constant is the constant, 1e-9 rounding).
    assert res.kpis["min_margin"] == pytest.approx(0.0, abs=1e-9)
    # Specific force to the left (as in a left turn) loads the right, outer wheel:
    # the ZMP moves right (common practice, no source).
    assert res.kpis["side_of_min"] == "right"
    assert res.series[cat.STATIC_STABILITY_FACTOR].to_numpy() == pytest.approx(np.full(n, 0.4))


def test_detector_steady_leaned_turn_margin_one_from_body_accelerometer() -> None:
    n, v, radius = 400, 2.0, -3.0  # turning right
    # Cossalter: tan(phi) = v^2/(g R), into the turn (right turn: right side down, phi > 0)
    phi = np.arctan(v**2 / (G * abs(radius)))
    f_y = v**2 / radius  # to the right
    theta = 0.05  # some nose-down pitch, which the rotation must remove
    reading = _body_reading((0.0, f_y, G), phi, theta)
    frame = _frame(
        n,
        {
            cat.ROLL: np.full(n, phi),
            cat.PITCH: np.full(n, theta),
            cat.ACCEL_X: np.full(n, reading[0]),
            cat.ACCEL_Y: np.full(n, reading[1]),
            cat.ACCEL_Z: np.full(n, reading[2]),
        },
    )
    res = detect_tip_margin(frame, _profile())
    # Steady-turn lean (Cossalter): ZMP on the centre line, margin 1 (rounding only)
    assert res.series[cat.TIP_MARGIN].to_numpy() == pytest.approx(np.ones(n), abs=1e-9)
    assert res.events == []


def test_detector_fallback_without_accelerometer() -> None:
    n, v, yaw_rate = 300, 2.0, 0.5  # m/s, rad/s (left turn)
    frame = _frame(
        n, {cat.ROLL: np.zeros(n), cat.VEL_X: np.full(n, v), cat.YAW_RATE: np.full(n, yaw_rate)}
    )
    res = detect_tip_margin(frame, _profile())
    assert res.kpis["method"] == METHOD_FALLBACK
    assert any("fallback" in note for note in res.notes)
    # Centripetal acceleration v * omega (steady circular motion, common practice, no
    # source) = 1.0 m/s²; upright: margin = 1 - L_c (v w / g) / (b/2) by hand.
    expected = 1.0 - COM_HEIGHT * (v * yaw_rate / G) / (TRACK / 2)
    assert res.kpis["min_margin"] == pytest.approx(expected, abs=1e-9)


def test_detector_event_side_and_duration() -> None:
    n = 1000
    t = np.arange(n) * 0.01
    # 0.35 g to the right for 1 s: margin 1 - 0.5 * 0.35 / 0.2 = 0.125 (by hand).
    a_y = np.where((t >= 4.0) & (t < 5.0), -0.35 * G, 0.0)
    frame = _frame(
        n,
        {
            cat.ROLL: np.zeros(n),
            cat.ACCEL_X: np.zeros(n),
            cat.ACCEL_Y: a_y,
            cat.ACCEL_Z: np.full(n, G),
        },
    )
    res = detect_tip_margin(frame, _profile())
    assert len(res.events) == 1
    ev = res.events[0]
    assert ev.kind == cat.LOW_TIP_MARGIN and ev.channel is None
    # Force to the right: the ZMP moves toward the left wheel, the right wheel unloads.
    assert ev.detail["side"] == "left" and ev.detail["unloading_wheel"] == "right"
    # The 5 Hz zero-phase low-pass rings a little at the steps; reference: scipy.signal
    # filtfilt (transfer-function form, same padding) of the same trace, then the margin
    # by hand; 1e-6 covers sos vs transfer-function rounding.
    b, a = sps.butter(2, 5.0, fs=100.0)
    f_ref = sps.filtfilt(b, a, a_y)
    assert ev.peak == pytest.approx(1.0 - COM_HEIGHT * np.max(np.abs(f_ref)) / G / 0.2, abs=1e-6)
    # Unfiltered plateau by hand: 1 - 0.5 * 0.35 / 0.2 = 0.125; ringing is a few per cent.
    assert ev.peak == pytest.approx(0.125, abs=0.05)
    # The filtered step crosses the threshold within ~0.1 s of the true edges (5 Hz).
    assert ev.start_s == pytest.approx(4.0, abs=0.1) and ev.end_s == pytest.approx(5.0, abs=0.1)
    assert res.kpis["time_below_s"] == pytest.approx(1.0, abs=0.1)
    assert any("pitch" in note for note in res.notes)  # pitch not logged: said so


def test_detector_nan_gap_and_short_run() -> None:
    n = 8  # shorter than the filter padding (9 samples for order 2)
    frame = _frame(
        n,
        {
            cat.ROLL: np.zeros(n),
            cat.ACCEL_X: np.zeros(n),
            cat.ACCEL_Y: np.full(n, 0.2 * G),
            cat.ACCEL_Z: np.full(n, G),
        },
    )
    frame.loc[3, cat.ACCEL_Y] = np.nan
    res = detect_tip_margin(frame, _profile())
    margin = res.series[cat.TIP_MARGIN].to_numpy()
    assert np.isnan(margin[3])
    # SSF relation: a_y = 0.2 g is half the SSF, margin 0.5 (by hand), constant through the filter.
    assert np.delete(margin, 3) == pytest.approx(np.full(n - 1, 0.5), abs=1e-9)
    assert any("shorter than the filter padding" in note for note in res.notes)


def test_detector_free_fall_counts_as_no_support() -> None:
    n = 300
    t = np.arange(n) * 0.01
    falling = (t >= 1.0) & (t < 1.5)
    # In free fall an accelerometer reads zero specific force (definition of specific
    # force, common practice, no source).
    frame = _frame(
        n,
        {
            cat.ROLL: np.zeros(n),
            cat.ACCEL_X: np.zeros(n),
            cat.ACCEL_Y: np.zeros(n),
            cat.ACCEL_Z: np.where(falling, 0.0, G),
        },
    )
    res = detect_tip_margin(frame, _profile())
    zmp = res.series[cat.ZMP_Y].to_numpy()
    margin = res.series[cat.TIP_MARGIN].to_numpy()
    # No wheel carries load: the ZMP is undefined and the margin is reported as 0.
    assert np.isnan(zmp[(t > 1.1) & (t < 1.4)]).all()
    assert margin[(t > 1.1) & (t < 1.4)] == pytest.approx(np.zeros(29))
    assert len(res.events) == 1 and res.events[0].detail["unsupported"] is True
    # No sample of the event has a ZMP, so no side is named.
    assert res.events[0].detail["side"] is None
    assert res.kpis["unsupported_s"] > 0.4


def test_detector_linear_com_model_uses_mean_leg_length() -> None:
    n = 200
    frame = _frame(
        n,
        {
            cat.ROLL: np.zeros(n),
            cat.ACCEL_X: np.zeros(n),
            cat.ACCEL_Y: np.zeros(n),
            cat.ACCEL_Z: np.full(n, G),
            cat.LEG_L_LENGTH: np.full(n, 0.30),
            cat.LEG_R_LENGTH: np.full(n, 0.34),
        },
    )
    res = detect_tip_margin(
        frame, _profile({"model": "linear", "offset_m": 0.05, "leg_factor": 1.0})
    )
    # L_c = r + offset + leg_factor * mean(L) = 0.1 + 0.05 + 0.32 (profile model, by hand)
    assert res.series[cat.COM_HEIGHT].to_numpy() == pytest.approx(np.full(n, 0.47))


def test_detector_skips_without_roll_or_force() -> None:
    n = 50
    no_roll = detect_tip_margin(_frame(n, {cat.ACCEL_Y: np.zeros(n)}), _profile())
    assert no_roll.skipped is not None and cat.ROLL in no_roll.skipped
    no_force = detect_tip_margin(_frame(n, {cat.ROLL: np.zeros(n)}), _profile())
    assert no_force.skipped is not None
    assert cat.ACCEL_Y in no_force.skipped and cat.VEL_X in no_force.skipped
    no_legs = detect_tip_margin(
        _frame(n, {cat.ROLL: np.zeros(n), cat.VEL_X: np.ones(n), cat.YAW_RATE: np.zeros(n)}),
        _profile({"model": "linear", "offset_m": 0.05, "leg_factor": 1.0}),
    )
    assert no_legs.skipped is not None and cat.LEG_L_LENGTH in no_legs.skipped


def test_a_centred_zmp_has_no_side() -> None:
    n = 400
    frame = _frame(
        n,
        {
            cat.ACCEL_X: np.zeros(n),
            cat.ACCEL_Y: np.zeros(n),
            cat.ACCEL_Z: np.full(n, G),
            cat.ROLL: np.zeros(n),
            cat.PITCH: np.zeros(n),
        },
    )
    kpis = detect_tip_margin(frame, _profile()).kpis
    # Upright at rest: the ZMP is under the CoM on the centre line (margin 1 by the
    # definition 1 - |y_zmp| / (b/2)), so neither wheel is the loaded one.
    assert kpis["min_margin"] == pytest.approx(1.0)
    assert kpis["side_of_min"] is None
    # Force-angle margin upright at rest: the angle from straight down to a contact b/2
    # aside and L_c below is atan(b / (2 L_c)) (geometry; Papadopoulos & Rey 1996).
    assert kpis["min_force_angle"] == pytest.approx(np.arctan(TRACK / (2 * COM_HEIGHT)))


def test_specific_force_is_computed_once_per_frame_and_cutoff():
    import dataclasses

    from analysis.detect.tipover import com_specific_force, compute_com_specific_force

    n = 400
    t = np.arange(n) * 0.01
    frame = _frame(
        n,
        {
            cat.ACCEL_Y: 0.5 * np.sin(t),
            cat.ACCEL_Z: np.full(n, G),
            cat.ROLL: np.zeros(n),
            cat.PITCH: np.zeros(n),
        },
    )
    th = _profile().thresholds
    first = com_specific_force(frame, th)
    assert com_specific_force(frame, th) is first  # the tip and roll detectors share it
    fresh = compute_com_specific_force(frame, th)
    assert not isinstance(first, str) and not isinstance(fresh, str)
    np.testing.assert_array_equal(first.f_y, fresh.f_y)
    # Another frame (even equal) or another cutoff is computed anew.
    assert com_specific_force(frame.copy(), th) is not first
    other = dataclasses.replace(th, accel_cutoff=th.accel_cutoff / 2)
    assert com_specific_force(frame, other) is not first
