"""Tip-over margin KPIs and events through ``detect_tip_margin`` (issue 18).

Hand-built accelerometer traces with the low-pass switched off (``accel_cutoff``
0), so each sample's margin follows from the point-mass ZMP by hand and the
KPIs can be checked to rounding. The low-passed path is checked in
``test_tipover.py``.
"""

from __future__ import annotations

from dataclasses import replace

import numpy as np
import pandas as pd
import pytest

from analysis import catalogue as cat
from analysis.detect.tipover import detect_tip_margin
from analysis.profile import RobotProfile, Thresholds, profile_from_dict

G = 9.80665  # m/s², standard gravity, ISO 80000-3 (typed here, not imported)
TRACK = 0.40  # m, invented robot
COM_HEIGHT = 0.50  # m, invented robot
DT = 0.01  # s


def _profile() -> RobotProfile:
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
            "com": {"model": "constant", "height_m": COM_HEIGHT},
            "actuators": {
                "wheel_l": {**wheel, "side": "left"},
                "wheel_r": {**wheel, "side": "right"},
            },
        }
    )


def _upright(a_y_g: np.ndarray) -> pd.DataFrame:
    """Upright, level body with the given lateral specific force in g (left positive)."""
    n = a_y_g.size
    return pd.DataFrame(
        {
            cat.T: np.arange(n) * DT,
            cat.ROLL: np.zeros(n),
            cat.PITCH: np.zeros(n),
            cat.ACCEL_X: np.zeros(n),
            cat.ACCEL_Y: a_y_g * G,
            cat.ACCEL_Z: np.full(n, G),
        }
    )


def _unfiltered() -> Thresholds:
    return replace(_profile().thresholds, accel_cutoff=0.0)


def test_margin_kpis_and_event_ends_on_a_stepped_lateral_force() -> None:
    t = np.arange(1000) * DT  # 10 s at 100 Hz
    # Upright, the point-mass ZMP gives m = 1 - (L_c / (b/2)) |a_y| / g = 1 - 2.5 |a_y| / g
    # (Kajita et al. 2003; margin at 0 for a_y / g = b / (2 L_c) = 0.4, NHTSA SSF). So:
    #   0.30 g to the left  -> m = 0.25   (50 samples, 2.00-2.49 s)
    #   0.38 g to the right -> m = 0.05   (5 samples, 2.50-2.54 s: the minimum)
    #   0.272 g to the left -> m = 0.32   (100 samples, 2.55-3.54 s: between on 0.3 and off 0.35)
    #   0.272 g to the left -> m = 0.32   (100 samples, 6.00-6.99 s: never below on)
    a_y_g = np.select(
        [
            (t >= 1.995) & (t < 2.495),
            (t >= 2.495) & (t < 2.545),
            (t >= 2.545) & (t < 3.545),
            (t >= 5.995) & (t < 6.995),
        ],
        [0.30, -0.38, 0.272, 0.272],
        0.0,
    )
    frame = _upright(a_y_g)
    frame.loc[100:104, cat.ACCEL_Y] = np.nan  # a logging hole before the minimum (1.00-1.04 s)
    res = detect_tip_margin(frame, _profile(), _unfiltered())
    margin = res.series[cat.TIP_MARGIN].to_numpy()
    assert margin[210] == pytest.approx(0.25, abs=1e-12)
    assert margin[252] == pytest.approx(0.05, abs=1e-12)
    assert margin[300] == pytest.approx(0.32, abs=1e-12)
    k = res.kpis
    assert k["min_margin"] == pytest.approx(0.05, abs=1e-12)
    # The first of the five lowest samples; times are exact multiples of 10 ms.
    assert k["min_margin_t_s"] == pytest.approx(2.50, abs=1e-12)
    # 1st percentile (numpy.percentile, linear): of the 995 logged samples the lowest are 5 at
    # 0.05 and 50 at 0.25; rank 0.01 * 994 = 9.94 falls between the 10th and 11th, both 0.25.
    assert k["p1_margin"] == pytest.approx(0.25, abs=1e-12)
    # The force at the minimum pushes right: the ZMP moves left, toward the loaded left wheel
    # (zmp_y = -z_c f_y / f_z > 0 for f_y < 0, Kajita et al. 2003).
    assert k["side_of_min"] == "left"
    # Time below the entry level 0.3 (sample durations, half of each neighbouring interval):
    # the 55 samples at 0.25 and 0.05, 10 ms each; the 0.32 stretches are not below it.
    # Logged time: 9.99 s minus the 5 NaN samples' share, 0.06 s (the hole's intervals).
    assert k["time_below_s"] == pytest.approx(0.55, abs=1e-12)
    assert k["share_below"] == pytest.approx(0.55 / (9.99 - 0.06), rel=1e-12)
    # Hysteresis: one event entered below 0.3 at 2.00 s and held while below 0.35, to the last
    # 0.32 sample at 3.54 s; the second 0.32 stretch never enters.
    assert [(e.start_s, e.end_s) for e in res.events] == [pytest.approx((2.0, 3.54), abs=1e-12)]
    ev = res.events[0]
    assert ev.peak == pytest.approx(0.05, abs=1e-12)
    assert (ev.detail["side"], ev.detail["unloading_wheel"]) == ("left", "right")
    assert k["event_count"] == 1
    # NHTSA SSF = b / (2 L_c) = 0.4 with the constant CoM height.
    assert k["min_static_stability_factor"] == pytest.approx(0.4, abs=1e-12)
    # Force-angle (Papadopoulos & Rey 1996), upright: the loaded contact lies atan(b / (2 L_c))
    # from straight down and the net force atan(|a_y| / g) from it, so at the minimum the
    # angle is atan(0.4) - atan(0.38) (geometry by hand).
    assert k["min_force_angle"] == pytest.approx(np.arctan(0.4) - np.arctan(0.38), abs=1e-12)
    assert (k["unsupported_s"], k["accel_cutoff_hz"]) == (0.0, 0.0)


def test_side_of_min_right_when_the_force_pushes_left() -> None:
    t = np.arange(300) * DT
    a_y_g = np.where((t >= 0.995) & (t < 1.495), 0.36, np.where(t >= 2.0, -0.1, 0.0))
    res = detect_tip_margin(_upright(a_y_g), _profile(), _unfiltered())
    # 0.36 g to the left: m = 1 - 2.5 * 0.36 = 0.1 (point-mass ZMP by hand); the ZMP moves
    # right, toward the loaded right wheel, and the left wheel unloads.
    assert res.kpis["min_margin"] == pytest.approx(0.1, abs=1e-12)
    assert res.kpis["min_margin_t_s"] == pytest.approx(1.0, abs=1e-12)
    assert res.kpis["side_of_min"] == "right"
    ev = res.events[0]
    assert (ev.detail["side"], ev.detail["unloading_wheel"]) == ("right", "left")
    # zmp_y = -L_c f_y / f_z = -0.5 * 0.36 = -0.18 m (right of the centre line).
    assert ev.detail["zmp_y_m"] == pytest.approx(-0.18, abs=1e-12)


def test_fallback_lateral_force_at_a_lean() -> None:
    # No accelerometer: f_y = vel_x * yaw_rate (centripetal acceleration of a steady turn,
    # common practice, no source), f_z = g. Left turn at 2 m/s and 1 rad/s: f_y = 2 m/s².
    n, v, w = 300, 2.0, 1.0
    base = {cat.T: np.arange(n) * DT, cat.VEL_X: np.full(n, v), cat.YAW_RATE: np.full(n, w)}
    # Leaning into the turn at the steady-turn angle tan(phi) = v^2 / (g R) = v w / g
    # (Cossalter, Motorcycle Dynamics), left side down (negative roll, ISO 8855): ZMP centred.
    into = -np.arctan(v * w / G)
    res = detect_tip_margin(pd.DataFrame({**base, cat.ROLL: np.full(n, into)}), _profile())
    assert res.kpis["method"] == "fallback vel_x*yaw_rate"
    # Margin 1 by the steady-turn relation; the filter passes a constant (DC gain 1), 1e-9.
    assert res.series[cat.TIP_MARGIN].to_numpy() == pytest.approx(np.ones(n), abs=1e-9)
    # Leaning the same angle out of the turn: y_zmp = -L_c sin(phi) - L_c cos(phi) f_y / g with
    # phi = -into, i.e. -2 L_c sin(|phi|), so m = 1 - 2 L_c sin(|phi|) / (b/2), ZMP right.
    out = detect_tip_margin(pd.DataFrame({**base, cat.ROLL: np.full(n, -into)}), _profile())
    expected = 1.0 - 2.0 * COM_HEIGHT * np.sin(-into) / (TRACK / 2)
    assert out.kpis["min_margin"] == pytest.approx(expected, abs=1e-9)
    assert out.kpis["side_of_min"] == "right"


def test_free_fall_time_and_margin_without_the_filter() -> None:
    t = np.arange(300) * DT
    falling = (t >= 0.995) & (t < 1.495)  # 50 samples, 1.00-1.49 s
    frame = _upright(np.zeros(t.size))
    # In free fall an accelerometer reads zero specific force (definition of specific force,
    # common practice, no source).
    frame.loc[falling, cat.ACCEL_Z] = 0.0
    res = detect_tip_margin(frame, _profile(), _unfiltered())
    k = res.kpis
    # The 50 unsupported samples stand for 10 ms each (half of each neighbouring interval):
    # 0.5 s, counted as unsupported and as below the 0.3 entry level (margin reported as 0).
    assert k["unsupported_s"] == pytest.approx(0.5, abs=1e-12)
    assert k["time_below_s"] == pytest.approx(0.5, abs=1e-12)
    assert k["share_below"] == pytest.approx(0.5 / 2.99, rel=1e-12)
    assert (k["min_margin"], k["min_margin_t_s"]) == pytest.approx((0.0, 1.0), abs=1e-12)
    # No sample of the minimum has a ZMP, and upright elsewhere the ZMP is centred: no side.
    assert k["side_of_min"] is None
    assert [(e.start_s, e.end_s, e.peak) for e in res.events] == [
        pytest.approx((1.0, 1.49, 0.0), abs=1e-12)
    ]
    assert res.events[0].detail["unsupported"] is True
