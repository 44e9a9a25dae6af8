"""Tests of the wheel-slip detector on small synthetic frames built from the kinematics.

The frames are built forwards from a chosen contact-midpoint speed with analytic
derivatives (base ahead of the axle by L sin(pitch), tilted by (r + L) sin(roll)),
so the detector's numerical lever arm and split across the track are checked
against closed forms, not against themselves.
"""

from __future__ import annotations

from dataclasses import replace

import numpy as np
import pandas as pd
import pytest

from analysis.detect.slip import detect_slip, slip_ratio, spin_or_skid
from analysis.events import Event
from analysis.profile import Actuator, ComModel, RobotProfile, Thresholds

R, B, L = 0.1, 0.5, 0.3  # wheel radius, track width, leg length [m] of the invented Marram-2
RATE_HZ = 200.0


def _profile(reference: str = "leg") -> RobotProfile:
    return RobotProfile(
        name="Marram-2",
        wheel_radius=R,
        track_width=B,
        mass=20.0,
        com=ComModel("constant", height=0.5),
        wheel_encoder_reference=reference,
        actuators=(
            Actuator("wheel_l", "wheel", "l", 10.0, 4.0),
            Actuator("wheel_r", "wheel", "r", 10.0, 4.0),
        ),
        thresholds=Thresholds.defaults(),
    )


def _frame(
    v_mid: float = 2.0,
    yaw_rate: float = 0.0,
    roll: float = 0.0,
    pitch_amp: float = 0.1,
    duration_s: float = 3.0,
    t: np.ndarray | None = None,
) -> pd.DataFrame:
    """A slip-free run: the wheels roll exactly at their contacts' ground speed."""
    if t is None:
        t = np.arange(int(duration_s * RATE_HZ)) / RATE_HZ
    omega = 2 * np.pi  # pitch oscillation [rad/s]
    pitch = pitch_amp * np.sin(omega * t)
    pitch_rate = pitch_amp * omega * np.cos(omega * t)
    # Forward kinematics of the model: v_base = v_mid + d/dt(L sin(pitch)) + yaw (r+L) sin(roll).
    vel_x = v_mid + L * np.cos(pitch) * pitch_rate + yaw_rate * (R + L) * np.sin(roll)
    v_l = v_mid - yaw_rate * B / 2
    v_r = v_mid + yaw_rate * B / 2
    n = t.size
    return pd.DataFrame(
        {
            "t": t,
            "vel_x": vel_x,
            "yaw_rate": np.full(n, yaw_rate),
            "pitch": pitch,
            "pitch_rate": pitch_rate,
            "roll": np.full(n, roll),
            "leg_l.length": np.full(n, L),
            "leg_r.length": np.full(n, L),
            # leg-referenced encoders: joint rate = ground rate - pitch rate
            "wheel_l.vel": v_l / R - pitch_rate,
            "wheel_r.vel": v_r / R - pitch_rate,
        }
    )


def _kinds(events: list[Event]) -> list[tuple[str, str | None]]:
    return [(e.kind, e.channel) for e in events]


# --- slip ratio -------------------------------------------------------------------------------


def test_slip_ratio_worked_numbers() -> None:
    kappa = slip_ratio(np.array([2.4, 1.6, -2.4]), np.array([2.0, 2.0, -2.0]), 0.5)
    # SAE J670 / Pacejka (Tire and Vehicle Dynamics, ch. 1): (v_rim - v) / |v|:
    # (2.4 - 2.0) / 2.0 = 0.2 driving, (1.6 - 2.0) / 2.0 = -0.2 braking; the same magnitudes
    # reversing, with the sign of the velocity difference.
    assert kappa == pytest.approx([0.2, -0.2, -0.2])


def test_slip_ratio_floor_at_zero_contact_speed() -> None:
    kappa = slip_ratio(np.array([0.05, 0.0]), np.array([0.0, 0.0]), 0.5)
    # Floor of the denominator (by construction, our own, see slip_ratio): 0.05 / max(0, 0.5)
    # = 0.1, finite where the plain SAE ratio would divide by zero.
    assert kappa == pytest.approx([0.1, 0.0])


def test_spin_or_skid_direction() -> None:
    v_rim = np.array([2.6, 1.2, -2.6, -1.2, 0.8, 0.05])
    v_contact = np.array([2.0, 2.0, -2.0, -2.0, 0.0, 0.4])
    # Rim ahead of the ground in the drive direction = spin (positive SAE slip when moving
    # forward, negative when reversing); rim lagging = skid; with the ground still, a rim
    # turning faster than the ground moves is a spin (common practice, no source).
    assert list(spin_or_skid(v_rim, v_contact, 0.5)) == [True, False, True, False, True, False]


# --- whole detector ---------------------------------------------------------------------------


def test_no_slip_on_a_leaned_pitching_turn() -> None:
    frame = _frame(v_mid=2.0, yaw_rate=1.0, roll=0.2, pitch_amp=0.1)
    res = detect_slip(frame, _profile())
    assert res.skipped is None
    assert res.events == []
    s = res.series
    # Differential drive (Siegwart et al. 2011, ch. 3): contacts at 2.0 -/+ 1.0 * 0.5 / 2.
    # Tolerance: the numerical d/dt(L sin(pitch)) is second order inside (error ~ h^2/6 *
    # L * 0.1 * (2 pi)^3 < 1e-4) and first order at the two end samples (~2e-3).
    assert s["wheel_l.contact_speed"].to_numpy() == pytest.approx(1.75, abs=3e-3)
    assert s["wheel_r.contact_speed"].to_numpy() == pytest.approx(2.25, abs=3e-3)
    # No slip by construction, so the slip speed is only the same numerical error.
    assert np.abs(s["wheel_l.slip_speed"]).max() < 3e-3
    # Without the lever arm the roll term alone would leave 1.0 * 0.4 * sin(0.2) = 0.079 m/s.
    assert np.abs(s["wheel_r.slip_speed"]).max() < 3e-3
    # Differential drive again: the wheels agree with the 1 rad/s gyro.
    assert s["yaw_rate_wheels"].to_numpy() == pytest.approx(1.0, abs=1e-9)
    assert res.kpis["wheel_l"]["event_count"] == 0
    assert res.kpis["yaw_slip"]["yaw_rate_diff_rms"] == pytest.approx(0.0, abs=1e-9)


def test_spin_of_the_left_wheel() -> None:
    frame = _frame(v_mid=2.0, yaw_rate=1.0, roll=0.2)
    t = frame["t"].to_numpy()
    burst = (t >= 1.0) & (t < 1.5)
    frame.loc[burst, "wheel_l.vel"] += 6.0  # rim 0.6 m/s ahead of its 1.75 m/s contact
    res = detect_slip(frame, _profile())
    slips = [e for e in res.events if e.kind == "slip"]
    assert _kinds(slips) == [("slip", "wheel_l")]
    ev = slips[0]
    assert (ev.start_s, ev.end_s) == pytest.approx((1.0, 1.495))
    # Slip speed r * 6 rad/s = 0.6 m/s, up to the 3e-3 lever-arm error (see above).
    assert ev.peak == pytest.approx(0.6, abs=3e-3)
    assert ev.detail["direction"] == "spin" and ev.detail["unit"] == "m/s"
    # SAE J670: kappa = 0.6 / 1.75 = 0.343 (contact speed from differential drive).
    assert ev.detail["slip_ratio_peak"] == pytest.approx(0.6 / 1.75, abs=3e-3)
    # Differential drive: the wheels now say 1.0 - 0.1 * 6 / 0.5 = -0.2 rad/s, the gyro 1.0.
    yaw = [e for e in res.events if e.kind == "yaw_slip"]
    assert len(yaw) == 1 and yaw[0].channel is None
    assert yaw[0].peak == pytest.approx(-1.2, abs=1e-9)
    k = res.kpis["wheel_l"]
    assert (k["event_count"], k["spin_count"], k["skid_count"]) == (1, 1, 0)
    assert k["peak_slip_speed"] == pytest.approx(0.6, abs=3e-3)
    # Pattern arithmetic: 100 samples of 5 ms inside the event out of 2.995 s logged.
    assert k["slipping_share"] == pytest.approx(0.5 / 2.995, rel=1e-9)
    assert res.kpis["wheel_r"]["event_count"] == 0


def test_skid_of_the_right_wheel_and_spin_in_reverse() -> None:
    frame = _frame(v_mid=-2.0)
    t = frame["t"].to_numpy()
    frame.loc[(t >= 0.5) & (t < 1.0), "wheel_r.vel"] += 8.0  # rim -1.2 against ground -2.0
    frame.loc[(t >= 2.0) & (t < 2.4), "wheel_l.vel"] -= 8.0  # rim -2.8 against ground -2.0
    res = detect_slip(frame, _profile())
    slips = {e.channel: e for e in res.events if e.kind == "slip"}
    # Reversing at 2 m/s: a rim slower than the ground lags (skid, positive slip speed 0.8);
    # a rim faster backwards runs ahead in the drive direction (spin, slip speed -0.8).
    assert slips["wheel_r"].detail["direction"] == "skid"
    assert slips["wheel_r"].peak == pytest.approx(0.8, abs=3e-3)
    assert slips["wheel_l"].detail["direction"] == "spin"
    assert slips["wheel_l"].peak == pytest.approx(-0.8, abs=3e-3)
    assert res.kpis["wheel_r"]["skid_count"] == 1


def test_standing_still_encoder_noise_is_no_slip_but_a_spinning_wheel_is() -> None:
    frame = _frame(v_mid=0.0, pitch_amp=0.0)
    rng = np.random.default_rng(3)
    noise = rng.normal(0.0, 0.15, (2, len(frame)))  # +-0.015 m/s rim noise (1 sigma)
    frame["wheel_l.vel"] += noise[0]
    frame["wheel_r.vel"] += noise[1]
    quiet = detect_slip(frame, _profile())
    # Zero contact speed: with the 0.5 m/s floor the ratio stays below 0.1 and the slip speed
    # below 0.1 m/s, so noise at a standstill gives no slip events.
    assert [e for e in quiet.events if e.kind == "slip"] == []
    assert np.isfinite(quiet.series["wheel_l.slip_ratio"]).all()
    t = frame["t"].to_numpy()
    frame.loc[(t >= 1.0) & (t < 2.0), "wheel_l.vel"] += 8.0  # rim 0.8 m/s, ground 0
    spun = detect_slip(frame, _profile())
    ev = [e for e in spun.events if e.kind == "slip"]
    assert _kinds(ev) == [("slip", "wheel_l")] and ev[0].detail["direction"] == "spin"
    # Floor of the ratio: 0.8 / 0.5 = 1.6 plus the noise sample at the peak (< 5 sigma).
    assert ev[0].detail["slip_ratio_peak"] == pytest.approx(1.6, abs=0.2)


def test_low_speed_wobble_below_the_slip_speed_floor() -> None:
    frame = _frame(v_mid=0.05, pitch_amp=0.0)
    frame["wheel_l.vel"] += 0.3  # rim 0.08 m/s against 0.05 m/s: plain SAE ratio 0.6
    res = detect_slip(frame, _profile())
    assert res.events == []
    # Floor: 0.03 / max(0.05, 0.5) = 0.06 (by construction, the floor of slip_ratio; the plain
    # SAE ratio would flag 0.6).
    assert res.series["wheel_l.slip_ratio"].to_numpy() == pytest.approx(0.06, abs=1e-9)


def test_pitch_rate_correction_of_a_leg_referenced_encoder() -> None:
    frame = _frame(v_mid=1.0, pitch_amp=0.2)
    leg = detect_slip(frame, _profile("leg"))
    ground = detect_slip(frame, _profile("ground"))
    assert leg.events == []
    diff = leg.series["wheel_l.rim_speed"] - ground.series["wheel_l.rim_speed"]
    # Plane rigid-body kinematics (Meriam & Kraige, Engineering Mechanics: Dynamics, 7th ed.,
    # 2012, ch. 5): the wheel's rate over the ground is the leg's pitch rate plus its rate
    # against the leg, and a rolling rim moves at r times that rate; so v_rim = r (w_joint +
    # pitch_rate) for a leg-referenced encoder and r w_joint for a ground-referenced one, and
    # the two differ by r * pitch_rate exactly.
    assert diff.to_numpy() == pytest.approx(R * frame["pitch_rate"].to_numpy(), abs=1e-12)
    # Read as ground-referenced, the 0.2 * 2 pi * 0.1 = 0.126 m/s pitch swing looks like slip.
    assert np.abs(ground.series["wheel_l.slip_speed"]).max() > 0.1


def test_yaw_check_worked_number() -> None:
    frame = _frame(v_mid=2.0, yaw_rate=0.8, pitch_amp=0.0)
    t = frame["t"].to_numpy()
    frame.loc[(t >= 1.0) & (t < 2.0), "yaw_rate"] = 0.3  # gyro disagrees by 0.5 rad/s
    res = detect_slip(frame, _profile())
    # Differential drive (Siegwart et al. 2011, ch. 3): r (w_R - w_L) / b = 0.1 * (22 - 18) /
    # 0.5 = 0.8 rad/s from the wheels.
    assert res.series["yaw_rate_wheels"].to_numpy() == pytest.approx(0.8, abs=1e-9)
    yaw = [e for e in res.events if e.kind == "yaw_slip"]
    assert [(e.start_s, e.end_s) for e in yaw] == [pytest.approx((1.0, 1.995))]
    assert yaw[0].peak == pytest.approx(0.5, abs=1e-9)
    # RMS of a 0.5 rad/s difference held over 1.0 s of the 2.995 s logged (zero-order hold).
    assert res.kpis["yaw_slip"]["yaw_rate_diff_rms"] == pytest.approx(
        0.5 * np.sqrt(1.0 / 2.995), rel=1e-9
    )


def test_slip_never_bridges_a_data_gap_and_survives_nan_holes() -> None:
    t = np.concatenate((np.arange(0, 1.0, 0.005), np.arange(1.1, 2.0, 0.005)))
    frame = _frame(v_mid=2.0, t=t)
    frame.loc[(t >= 0.5), "wheel_l.vel"] += 6.0  # spinning across the 0.1 s hole in the log
    frame.loc[(t >= 1.5) & (t < 1.55), "vel_x"] = np.nan  # as-of join hole
    res = detect_slip(frame, _profile())
    slips = [e for e in res.events if e.kind == "slip"]
    # Never across the data gap; the NaN hole is no time gap and is bridged by the merge gap.
    assert [(e.start_s, e.end_s) for e in slips] == [
        pytest.approx((0.5, 0.995)),
        pytest.approx((1.1, t[-1])),
    ]
    s = res.series.set_index("t")
    assert s.loc[1.5:1.545, "wheel_l.slip_speed"].isna().all()
    assert np.isfinite(res.kpis["wheel_l"]["peak_slip_speed"])


def test_thresholds_argument_overrides_the_profile() -> None:
    frame = _frame(v_mid=2.0)
    t = frame["t"].to_numpy()
    frame.loc[(t >= 1.0) & (t < 1.5), "wheel_l.vel"] += 3.0  # slip 0.3 m/s, ratio 0.15
    assert _kinds(detect_slip(frame, _profile()).events) == [("yaw_slip", None)]
    th = replace(Thresholds.defaults(), slip_ratio_on=0.1, slip_ratio_off=0.05)
    assert _kinds(detect_slip(frame, _profile(), th).events) == [
        ("slip", "wheel_l"),
        ("yaw_slip", None),
    ]


# --- missing signals --------------------------------------------------------------------------


@pytest.mark.parametrize(
    ("drop", "reference", "named"),
    [
        (["vel_x"], "leg", "vel_x"),
        (["yaw_rate"], "leg", "yaw_rate"),
        (["pitch_rate"], "leg", "pitch_rate"),
        (["wheel_l.vel", "wheel_r.vel"], "leg", "wheel_l.vel"),
    ],
)
def test_skipped_with_a_reason_naming_the_missing_signal(
    drop: list[str], reference: str, named: str
) -> None:
    res = detect_slip(_frame().drop(columns=drop), _profile(reference))
    assert res.skipped is not None
    assert f"no {named}" in res.skipped and "map" in res.skipped
    assert res.events == [] and res.kpis == {}


def test_ground_referenced_encoders_need_no_pitch_rate() -> None:
    frame = _frame(pitch_amp=0.0).drop(columns=["pitch_rate"])
    res = detect_slip(frame, _profile("ground"))
    assert res.skipped is None and set(res.kpis) == {"wheel_l", "wheel_r", "yaw_slip"}


def test_one_wheel_missing_analyses_the_other_with_notes() -> None:
    res = detect_slip(_frame().drop(columns=["wheel_r.vel"]), _profile())
    assert res.skipped is None
    assert set(res.kpis) == {"wheel_l"}
    assert any("wheel_r.vel" in n for n in res.notes)
    assert any("yaw-rate check" in n for n in res.notes)
    assert "yaw_rate_wheels" not in res.series


def test_no_leg_lengths_drops_the_lever_arm_with_a_note() -> None:
    frame = _frame(pitch_amp=0.0).drop(columns=["leg_l.length", "leg_r.length"])
    res = detect_slip(frame, _profile())
    assert res.skipped is None
    assert any("lever-arm" in n for n in res.notes)


def test_one_leg_length_is_enough() -> None:
    frame = _frame(v_mid=2.0, yaw_rate=1.0, roll=0.2).drop(columns=["leg_r.length"])
    res = detect_slip(frame, _profile())
    # Same tolerance as the two-leg case: the lever arm is applied with the one leg length.
    assert np.abs(res.series["wheel_l.slip_speed"]).max() < 3e-3
