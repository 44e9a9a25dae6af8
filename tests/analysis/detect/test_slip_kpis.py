"""Wheel-slip events and KPIs through ``detect_slip``, on hand-built frames (issue 18).

Every frame here has a level body (pitch, pitch rate and roll 0) and constant leg
lengths, so whichever way the detector evaluates the lever arm the contact speed
is the base speed split across the track; the rim speeds are set sample by sample.
Expected values are worked by hand from the definitions named beside each check.
"""

from __future__ import annotations

from dataclasses import replace

import numpy as np
import pandas as pd
import pytest

from analysis.detect.slip import detect_slip
from analysis.events import DetectorResult
from analysis.profile import Actuator, ComModel, RobotProfile, Thresholds

R, B = 0.1, 0.5  # wheel radius and track width [m] of the invented robot Marram-2
RATE_HZ = 200.0
DT = 1.0 / RATE_HZ


def _profile(thresholds: Thresholds | None = None) -> RobotProfile:
    return RobotProfile(
        name="Marram-2",
        wheel_radius=R,
        track_width=B,
        mass=20.0,
        com=ComModel("constant", height=0.5),
        wheel_encoder_reference="leg",
        actuators=(
            Actuator("wheel_l", "wheel", "l", 10.0, 4.0),
            Actuator("wheel_r", "wheel", "r", 10.0, 4.0),
        ),
        thresholds=thresholds or Thresholds.defaults(),
    )


def _frame(
    v_base: float, rim_l: np.ndarray, rim_r: np.ndarray, yaw_rate: float = 0.0
) -> pd.DataFrame:
    """A level run at a constant base speed with the given rim speeds [m/s] (3 s, 200 Hz)."""
    n = rim_l.size
    t = np.arange(n) * DT
    zeros = np.zeros(n)
    return pd.DataFrame(
        {
            "t": t,
            "vel_x": np.full(n, v_base),
            "yaw_rate": np.full(n, yaw_rate),
            "pitch": zeros,
            "pitch_rate": zeros,
            "roll": zeros,
            "leg_l.length": np.full(n, 0.3),
            "leg_r.length": np.full(n, 0.3),
            # Leg-referenced encoders with the leg not pitching: joint rate = rim speed / r.
            "wheel_l.vel": rim_l / R,
            "wheel_r.vel": rim_r / R,
        }
    )


def _t(duration_s: float = 3.0) -> np.ndarray:
    return np.arange(int(round(duration_s * RATE_HZ))) * DT


def _slips(res: DetectorResult, channel: str) -> list[tuple[float, float]]:
    return [(e.start_s, e.end_s) for e in res.events if e.kind == "slip" and e.channel == channel]


def test_slip_at_a_standstill_ends_where_the_slip_speed_falls_below_its_floor() -> None:
    t = _t()
    # Robot still; the left rim turns at 0.3 m/s for 0.5 s, then creeps at 0.07 m/s for 1 s.
    rim_l = np.select([(t >= 0.5) & (t < 1.0), (t >= 1.0) & (t < 2.0)], [0.3, 0.07], 0.0)
    frame = _frame(0.0, rim_l, np.zeros(t.size))
    frame.loc[(t >= 2.5) & (t < 2.6), "vel_x"] = np.nan  # 20 samples without a base speed
    res = detect_slip(frame, _profile())
    # Slip ratio with the 0.5 m/s floor (slip_ratio docstring, SAE J670 with the floor ours):
    # 0.3 / 0.5 = 0.6 > 0.2 starts an event; the creep's 0.07 / 0.5 = 0.14 stays above the
    # 0.1 exit level, so only the slip-speed floor (0.07 < 0.1 m/s) ends it, at the last
    # 0.3 m/s sample (t = 0.995 s; times are exact multiples of the 5 ms step).
    assert _slips(res, "wheel_l") == [pytest.approx((0.5, 0.995), abs=1e-12)]
    ev = next(e for e in res.events if e.kind == "slip")
    assert ev.peak == pytest.approx(0.3, abs=1e-12)
    assert ev.detail["slip_ratio_peak"] == pytest.approx(0.6, abs=1e-12)
    # Ground still and the rim turning: spin (spin_or_skid docstring, by construction).
    assert ev.detail["direction"] == "spin"
    k = res.kpis["wheel_l"]
    assert (k["event_count"], k["spin_count"], k["skid_count"]) == (1, 1, 0)
    # Pattern arithmetic (zero-order hold): 100 samples of 5 ms in the event, of the 2.995 s
    # logged less the 20 samples of 5 ms without a slip speed.
    assert k["slipping_share"] == pytest.approx(0.5 / (2.995 - 0.1), rel=1e-12)
    assert k["peak_slip_speed"] == pytest.approx(0.3, abs=1e-12)


def test_the_slip_speed_floor_also_keeps_an_event_from_starting() -> None:
    t = _t()
    rim_l = np.where((t >= 1.0) & (t < 2.0), 0.08, 0.0)  # creep 0.08 m/s with the robot still
    low = replace(Thresholds.defaults(), slip_ratio_on=0.1, slip_ratio_off=0.05)
    # Ratio 0.08 / 0.5 = 0.16 passes a 0.1 entry level, but 0.08 m/s is under the default
    # 0.1 m/s slip-speed floor: no event (definition of the floor, by construction).
    assert _slips(detect_slip(_frame(0.0, rim_l, np.zeros(t.size)), _profile(low)), "wheel_l") == []
    # With the floor lowered to 0.05 m/s the same creep is a 1 s event.
    lower = replace(low, slip_speed_min=0.05)
    res = detect_slip(_frame(0.0, rim_l, np.zeros(t.size)), _profile(lower))
    assert _slips(res, "wheel_l") == [pytest.approx((1.0, 1.995), abs=1e-12)]


def test_a_moving_slip_holds_until_the_ratio_falls_below_the_exit_level() -> None:
    t = _t()
    # Base at 2 m/s, no yaw: both contacts at 2 m/s (Siegwart et al. 2011, ch. 3). Left rim
    # 0.6 m/s ahead for 0.5 s (ratio 0.3), then 0.3 m/s ahead for 0.5 s (ratio 0.15).
    rim_l = 2.0 + np.select([(t >= 1.0) & (t < 1.5), (t >= 1.5) & (t < 2.0)], [0.6, 0.3], 0.0)
    res = detect_slip(_frame(2.0, rim_l, np.full(t.size, 2.0)), _profile())
    # Hysteresis (events.find_intervals): entered above 0.2, held while above 0.1, so the
    # 0.15 stretch belongs to the event; it ends at its last sample, 1.995 s.
    assert _slips(res, "wheel_l") == [pytest.approx((1.0, 1.995), abs=1e-12)]
    # Peak slip speed 0.6 m/s and the SAE J670 ratio there, 0.6 / 2.0 = 0.3 (not the 0.15
    # at the event's end).
    ev = next(e for e in res.events if e.kind == "slip")
    assert (ev.peak, ev.detail["slip_ratio_peak"]) == pytest.approx((0.6, 0.3), abs=1e-12)
    # With the levels raised to 0.35 / 0.2 neither stretch starts an event ...
    high = replace(Thresholds.defaults(), slip_ratio_on=0.35, slip_ratio_off=0.2)
    assert (
        _slips(detect_slip(_frame(2.0, rim_l, np.full(t.size, 2.0)), _profile(high)), "wheel_l")
        == []
    )
    # ... and at 0.25 / 0.2 the event stops where the ratio drops to 0.15.
    mid = replace(Thresholds.defaults(), slip_ratio_on=0.25, slip_ratio_off=0.2)
    res = detect_slip(_frame(2.0, rim_l, np.full(t.size, 2.0)), _profile(mid))
    assert _slips(res, "wheel_l") == [pytest.approx((1.0, 1.495), abs=1e-12)]


def test_skid_and_spin_kpis_on_both_wheels_with_negative_slip() -> None:
    t = _t()
    # Turning left at 1 rad/s with the base at 2 m/s: contacts at 2 -/+ 1 * 0.5 / 2, so
    # 1.75 m/s left and 2.25 m/s right (Siegwart et al. 2011, ch. 3).
    v_l, v_r = 1.75, 2.25
    rim_l = v_l + np.where((t >= 0.5) & (t < 1.0), -0.7, 0.0)  # lagging: skid, slip -0.7 m/s
    rim_r = v_r + np.where((t >= 2.0) & (t < 2.3), 0.9, 0.0)  # ahead: spin, slip +0.9 m/s
    res = detect_slip(_frame(2.0, rim_l, rim_r, yaw_rate=1.0), _profile())
    s = res.series
    assert s["wheel_l.contact_speed"].to_numpy() == pytest.approx(v_l, abs=1e-12)
    assert s["wheel_r.contact_speed"].to_numpy() == pytest.approx(v_r, abs=1e-12)
    left = next(e for e in res.events if e.kind == "slip" and e.channel == "wheel_l")
    right = next(e for e in res.events if e.kind == "slip" and e.channel == "wheel_r")
    # Slip speed v_rim - v_contact and SAE J670 ratio (v_rim - v_contact) / |v_contact|:
    # -0.7 / 1.75 = -0.4 (rim lags the ground: skid) and 0.9 / 2.25 = 0.4 (ahead: spin).
    assert (left.start_s, left.end_s, left.peak) == pytest.approx((0.5, 0.995, -0.7), abs=1e-12)
    assert left.detail["slip_ratio_peak"] == pytest.approx(-0.4, abs=1e-12)
    assert left.detail["direction"] == "skid"
    assert (right.start_s, right.end_s, right.peak) == pytest.approx((2.0, 2.295, 0.9), abs=1e-12)
    assert right.detail["slip_ratio_peak"] == pytest.approx(0.4, abs=1e-12)
    assert right.detail["direction"] == "spin"
    kl, kr = res.kpis["wheel_l"], res.kpis["wheel_r"]
    # peak_slip_speed is a magnitude (detect_slip docstring): 0.7 m/s, not the signed -0.7.
    assert kl["peak_slip_speed"] == pytest.approx(0.7, abs=1e-12)
    assert kr["peak_slip_speed"] == pytest.approx(0.9, abs=1e-12)
    assert (kl["event_count"], kl["spin_count"], kl["skid_count"]) == (1, 0, 1)
    assert (kr["event_count"], kr["spin_count"], kr["skid_count"]) == (1, 1, 0)
    # Pattern arithmetic (zero-order hold): 0.5 s and 0.3 s of the 2.995 s logged.
    assert kl["slipping_share"] == pytest.approx(0.5 / 2.995, rel=1e-12)
    assert kr["slipping_share"] == pytest.approx(0.3 / 2.995, rel=1e-12)
    # Yaw rate from the wheels, r (w_R - w_L) / b = (v_R - v_L) / b (Siegwart et al. 2011,
    # ch. 3), against the 1 rad/s gyro: (2.25 - 1.05) / 0.5 - 1 = +1.4 rad/s during the skid,
    # (3.15 - 1.75) / 0.5 - 1 = +1.8 rad/s during the spin; RMS over the 2.995 s logged.
    yaw = [(e.start_s, e.end_s, e.peak) for e in res.events if e.kind == "yaw_slip"]
    assert yaw == [
        pytest.approx((0.5, 0.995, 1.4), abs=1e-12),
        pytest.approx((2.0, 2.295, 1.8), abs=1e-12),
    ]
    rms = np.sqrt((1.4**2 * 0.5 + 1.8**2 * 0.3) / 2.995)
    assert res.kpis["yaw_slip"]["yaw_rate_diff_rms"] == pytest.approx(rms, rel=1e-12)
    assert res.kpis["yaw_slip"]["event_count"] == 2
