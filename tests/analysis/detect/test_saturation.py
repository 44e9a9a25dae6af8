"""Tests of the actuator-saturation detector on small hand-made frames."""

from __future__ import annotations

from dataclasses import replace

import numpy as np
import pandas as pd
import pytest

from analysis.detect.saturation import (
    detect_saturation,
    sliding_rms,
    torque_available,
    window_starts,
)
from analysis.events import Event
from analysis.profile import (
    Actuator,
    ComModel,
    MotorConstants,
    RobotProfile,
    Thresholds,
)

# Invented motor of the invented robot Marram-2: k_t = k_e = 0.5, R = 1 ohm, V = 24 V.
MOTOR = MotorConstants(k_t=0.5, k_e=0.5, resistance=1.0, bus_voltage=24.0)


def _profile(*actuators: Actuator, thresholds: Thresholds | None = None) -> RobotProfile:
    acts = actuators or (
        Actuator("wheel_l", "wheel", "l", peak_torque=10.0, continuous_torque=4.0),
        Actuator("wheel_r", "wheel", "r", peak_torque=10.0, continuous_torque=4.0),
    )
    return RobotProfile(
        name="Marram-2",
        wheel_radius=0.1,
        track_width=0.5,
        mass=20.0,
        com=ComModel("constant", height=0.5),
        wheel_encoder_reference="leg",
        actuators=tuple(acts),
        thresholds=thresholds or Thresholds.defaults(),
    )


def _spans(events: list[Event]) -> list[float]:
    """Start, end and peak of each event, flattened for pytest.approx."""
    return [x for e in events for x in (e.start_s, e.end_s, e.peak)]


def _t(duration_s: float = 2.0, rate_hz: float = 100.0) -> np.ndarray:
    return np.arange(int(round(duration_s * rate_hz))) / rate_hz


# --- torque-speed line ------------------------------------------------------------------------


def test_stall_torque_and_no_load_speed_of_the_dc_motor_line() -> None:
    act = Actuator("wheel_l", "wheel", "l", peak_torque=100.0, continuous_torque=5.0, motor=MOTOR)
    w = np.array([0.0, 24.0, -24.0, 48.0, 60.0])
    tau = torque_available(w, act)
    # DC motor equations (Hughes & Drury, Electric Motors and Drives, ch. 3): stall torque
    # k_t V / R = 0.5 * 24 / 1 = 12 N*m; no-load speed V / k_e = 48 rad/s (torque 0 there and,
    # floored, beyond); linear in between: 6 N*m at 24 rad/s in either direction.
    assert tau == pytest.approx([12.0, 6.0, 6.0, 0.0, 0.0], abs=1e-12)


def test_braking_quadrant_adds_the_back_emf() -> None:
    act = Actuator("wheel_l", "wheel", "l", peak_torque=100.0, continuous_torque=5.0, motor=MOTOR)
    w = np.array([24.0, 24.0, -24.0, 60.0])
    asked = np.array([1.0, -1.0, 1.0, -1.0])  # motoring, braking, braking, braking
    # DC motor equations (Hughes & Drury, ch. 3), drive applying -V while the back-EMF
    # k_e w adds: tau = k_t (V + k_e |w|) / R = 0.5 (24 + 0.5 * 24) / 1 = 18 N*m at 24 rad/s,
    # 0.5 (24 + 30) = 27 N*m at 60 rad/s, beyond the no-load speed of the motoring line.
    assert torque_available(w, act, asked) == pytest.approx([6.0, 18.0, 18.0, 27.0])


def test_torque_speed_line_is_capped_at_the_peak() -> None:
    act = Actuator("wheel_l", "wheel", "l", peak_torque=8.0, continuous_torque=5.0, motor=MOTOR)
    # Line 12 - 0.25 w (Hughes & Drury, ch. 3) meets the 8 N*m cap at w = 16 rad/s.
    assert torque_available(np.array([0.0, 16.0, 20.0]), act) == pytest.approx([8.0, 8.0, 7.0])
    plain = replace(act, motor=None)
    # Without motor constants the drive gives its peak at any speed (by construction: the
    # profile then holds only the peak rating, no torque-speed line).
    assert torque_available(np.array([0.0, 500.0]), plain) == pytest.approx([8.0, 8.0])


# --- sliding RMS ------------------------------------------------------------------------------


def test_rms_of_a_constant_torque_is_that_torque() -> None:
    t = _t(5.0)
    rms = sliding_rms(t, np.full(t.size, -3.0), window_s=1.0)
    # Definition of RMS: a constant c has RMS |c|.
    assert rms[1:] == pytest.approx(np.full(t.size - 1, 3.0), rel=1e-12)
    assert np.isnan(rms[0])  # the first sample covers no time yet


def test_rms_of_a_sine_over_whole_periods() -> None:
    t = _t(6.0, 1000.0)
    A = 4.0
    rms = sliding_rms(t, A * np.sin(2 * np.pi * 1.0 * t), window_s=2.0)
    full = t >= 2.0
    # Analytic: the RMS of a sinusoid of amplitude A over whole periods is A / sqrt(2)
    # (mean of sin^2 over a period is 1/2; standard circuit-theory result). Tolerance: the window edges fall between samples and are
    # read by linear interpolation; 1 ms of a 1 Hz sine changes the mean square by < 1e-4.
    assert rms[full] == pytest.approx(np.full(full.sum(), A / np.sqrt(2)), rel=1e-4)


def test_rms_of_a_ramp_over_a_full_window() -> None:
    t = _t(3.0, 1000.0)
    rms = sliding_rms(t, 2.0 * t, window_s=1.0)
    k = int(np.searchsorted(t, 1.0))
    # Analytic: x = a t over (0, W] has mean square a^2 W^2 / 3, so RMS = a W / sqrt(3).
    # The trapezoid rule is exact for the mean of a linear x but not of x^2: its error on
    # x^2 is a^2 dt^2 / 6 per unit time, ~ 1e-6 relative here.
    assert rms[k] == pytest.approx(2.0 * 1.0 / np.sqrt(3.0), rel=1e-5)


def test_rms_ignores_data_gaps_and_nan() -> None:
    t = np.concatenate((_t(1.0), 5.0 + _t(1.0)))
    x = np.full(t.size, 2.0)
    x[150] = np.nan
    rms = sliding_rms(t, x, window_s=3.0)
    # The first sample after the 4 s hole has no logged time in its 3 s window.
    assert np.isnan(rms[0]) and np.isnan(rms[100])
    rest = np.delete(rms, [0, 100])
    # A constant 2 N*m keeps RMS 2 whatever is missing (definition of RMS over logged time).
    assert rest == pytest.approx(np.full(rest.size, 2.0), rel=1e-12)


@pytest.mark.parametrize("window_s", [0.0, 0.0125, 0.3, 2.0, 50.0])
def test_window_starts_read_a_cumulative_sum_as_np_interp_does(window_s: float) -> None:
    # Reference: numpy.interp (linear interpolation, the first value before the first
    # sample), on irregular times with a repeated stamp and a data gap.
    rng = np.random.default_rng(7)
    t = np.cumsum(rng.uniform(0.001, 0.01, 600))
    t[100] = t[99]  # a repeated time stamp
    t[300:] += 4.0  # a hole of 4 s
    c = np.cumsum(rng.normal(size=t.size))
    j, frac = window_starts(t, window_s)
    got = c[j] + frac * (c[j + 1] - c[j])
    assert got == pytest.approx(np.interp(t - window_s, t, c), rel=1e-12, abs=1e-12)
    assert ((frac >= 0) & (frac <= 1)).all()


# --- request beyond the limiter ---------------------------------------------------------------


def _request_frame() -> pd.DataFrame:
    t = _t(2.0)
    req = np.full(t.size, 5.0)
    cmd = req.copy()
    cut = (t >= 0.5) & (t < 1.0)
    req[cut] = 15.0
    cmd[cut] = 10.0  # the limiter cut 15 to 10
    neg = (t >= 1.5) & (t < 1.7)
    req[neg], cmd[neg] = -12.0, -10.0
    return pd.DataFrame(
        {
            "t": t,
            "wheel_l.torque_req": req,
            "wheel_l.torque_cmd": cmd,
            "wheel_r.torque_req": np.full(t.size, -3.0),
            "wheel_r.torque_cmd": np.full(t.size, -3.0),
        }
    )


def test_saturation_where_request_exceeds_command() -> None:
    res = detect_saturation(_request_frame(), _profile())
    assert res.skipped is None
    ev = [e for e in res.events if e.channel == "wheel_l"]
    assert _spans(ev) == pytest.approx([0.5, 0.99, 15.0, 1.5, 1.69, -12.0])
    assert ev[0].detail["method"] == "request beyond limiter"
    assert ev[0].detail["signal"] == "wheel_l.torque_req"
    assert ev[0].detail["unit"] == "N*m"
    assert not [e for e in res.events if e.channel == "wheel_r"]
    k = res.kpis["wheel_l"]
    # Arithmetic of the pattern: 0.5 s + 0.2 s saturated of 1.99 s logged (zero-order hold).
    assert k["saturated_share"] == pytest.approx(0.7 / 1.99, rel=1e-9)
    assert k["event_count"] == 2
    assert k["longest_event_s"] == pytest.approx(0.49)
    assert res.kpis["wheel_r"]["saturated_share"] == 0.0
    assert res.series["wheel_l.saturated"].dtype == bool
    assert int(res.series["wheel_l.saturated"].sum()) == 70


def test_a_request_within_eps_is_not_saturation() -> None:
    frame = _request_frame()
    frame["wheel_l.torque_req"] = frame["wheel_l.torque_cmd"] + 0.04  # default eps is 0.05 N*m
    assert detect_saturation(frame, _profile()).kpis["wheel_l"]["event_count"] == 0


def test_saturation_never_bridges_a_data_gap() -> None:
    # Saturated throughout, with a 0.15 s hole in the log (shorter than the 0.25 s merge gap
    # but far longer than 5 sample periods, so a data gap).
    t = np.concatenate((_t(1.0), 1.14 + _t(1.0)))
    frame = pd.DataFrame(
        {"t": t, "wheel_l.torque_req": np.full(t.size, 12.0), "wheel_l.torque_cmd": 10.0}
    )
    prof = _profile(Actuator("wheel_l", "wheel", "l", 10.0, 4.0))
    res = detect_saturation(frame, prof)
    assert [x for e in res.events for x in (e.start_s, e.end_s)] == pytest.approx(
        [0.0, 0.99, 1.14, 2.13]
    )
    # Share over logged time only: every logged sample is saturated.
    assert res.kpis["wheel_l"]["saturated_share"] == pytest.approx(1.0)


def test_nan_holes_are_not_saturated() -> None:
    frame = _request_frame()
    frame.loc[60:69, "wheel_l.torque_req"] = np.nan  # 0.1 s hole inside the first event
    res = detect_saturation(frame, _profile())
    assert not res.series["wheel_l.saturated"].iloc[60:70].any()
    # The hole is shorter than the merge gap and is no time gap, so the event stays one.
    first = [e for e in res.events if e.channel == "wheel_l"][0]
    assert (first.start_s, first.end_s) == pytest.approx((0.5, 0.99))
    # Pattern arithmetic: 0.6 s saturated of 1.89 s where both signals were logged.
    assert res.kpis["wheel_l"]["saturated_share"] == pytest.approx(0.6 / 1.89, rel=1e-9)


# --- command at the available torque ---------------------------------------------------------


def test_saturation_at_the_available_torque_of_the_motor_line() -> None:
    t = _t(2.0)
    vel = np.where(t >= 1.0, 30.0, 0.0)
    cmd = np.full(t.size, 5.0)
    frame = pd.DataFrame({"t": t, "wheel_l.torque_cmd": cmd, "wheel_l.vel": vel})
    act = Actuator("wheel_l", "wheel", "l", peak_torque=10.0, continuous_torque=4.0, motor=MOTOR)
    res = detect_saturation(frame, _profile(act))
    # DC-motor line (Hughes & Drury ch. 3): available 0.5 (24 - 0.5 * 30) / 1 = 4.5 N*m at
    # 30 rad/s, so a 5 N*m command saturates there; at standstill the cap 10 N*m does not.
    avail = res.series["wheel_l.torque_available"].to_numpy()
    assert avail[t < 1.0] == pytest.approx(10.0)
    assert avail[t >= 1.0] == pytest.approx(4.5)
    assert _spans(res.events) == pytest.approx([1.0, 1.99, 5.0])
    assert res.events[0].detail["method"] == "at available torque"
    assert res.events[0].detail["signal"] == "wheel_l.torque_cmd"
    assert res.kpis["wheel_l"]["method"] == "at available torque"


def test_tolerance_against_the_peak_without_motor_constants() -> None:
    t = _t(1.0)
    cmd = np.where(t < 0.5, 9.7, 9.9)  # peak 10, default tol 2 %: limit 9.8 N*m
    frame = pd.DataFrame({"t": t, "wheel_l.torque_cmd": -cmd})
    res = detect_saturation(frame, _profile(Actuator("wheel_l", "wheel", "l", 10.0, 4.0)))
    assert _spans(res.events) == pytest.approx([0.5, 0.99, -9.9])


def test_motor_constants_without_velocity_fall_back_to_the_peak_with_a_note() -> None:
    t = _t(1.0)
    frame = pd.DataFrame({"t": t, "wheel_l.torque_cmd": np.full(t.size, 9.9)})
    act = Actuator("wheel_l", "wheel", "l", 10.0, 4.0, motor=MOTOR)
    res = detect_saturation(frame, _profile(act))
    assert res.series["wheel_l.torque_available"].to_numpy() == pytest.approx(10.0)
    assert any("no wheel_l.vel" in n for n in res.notes)
    assert res.kpis["wheel_l"]["event_count"] == 1


# --- thermal KPIs -----------------------------------------------------------------------------


def test_worst_thermal_window_and_ratio_to_continuous_rating() -> None:
    t = _t(30.0, 50.0)
    torque = np.where((t >= 12.0) & (t < 22.0), 6.0, 2.0)
    frame = pd.DataFrame({"t": t, "wheel_l.torque_cmd": torque * 0.5, "wheel_l.torque": torque})
    res = detect_saturation(frame, _profile(Actuator("wheel_l", "wheel", "l", 10.0, 4.0)))
    k = res.kpis["wheel_l"]
    # RMS of a constant is the constant: the 10 s window that holds only the 6 N*m stretch
    # (measured torque preferred over the command) is the worst, 6 / 4 of the rating.
    assert k["torque_rms_worst"] == pytest.approx(6.0, rel=1e-3)
    assert k["torque_rms_ratio"] == pytest.approx(1.5, rel=1e-3)
    assert k["torque_rms_worst_end_s"] == pytest.approx(21.98, abs=0.03)
    assert k["torque_rms_worst_start_s"] == pytest.approx(11.98, abs=0.03)


def test_run_shorter_than_the_thermal_window() -> None:
    t = _t(3.0)
    frame = pd.DataFrame({"t": t, "wheel_l.torque_cmd": np.full(t.size, 3.0)})
    res = detect_saturation(frame, _profile(Actuator("wheel_l", "wheel", "l", 10.0, 4.0)))
    # RMS of a constant is the constant; over a 3 s run with a 10 s window it covers the run.
    assert res.kpis["wheel_l"]["torque_rms_worst"] == pytest.approx(3.0)
    assert res.kpis["wheel_l"]["torque_rms_worst_start_s"] == 0.0
    assert any("shorter than the thermal window" in n for n in res.notes)


# --- missing signals --------------------------------------------------------------------------


def test_skipped_with_a_reason_when_no_actuator_has_torque_signals() -> None:
    t = _t(1.0)
    res = detect_saturation(pd.DataFrame({"t": t, "wheel_l.vel": np.zeros(t.size)}), _profile())
    assert res.skipped is not None
    assert "wheel_l.torque_cmd" in res.skipped and "channel map" in res.skipped
    assert res.events == [] and res.kpis == {}


def test_actuators_without_signals_are_noted_and_the_others_analysed() -> None:
    hip = Actuator("hip_l", "hip", "l", 30.0, 10.0)
    prof = _profile(
        Actuator("wheel_l", "wheel", "l", 10.0, 4.0),
        Actuator("wheel_r", "wheel", "r", 10.0, 4.0),
        hip,
    )
    res = detect_saturation(_request_frame(), prof)
    assert res.skipped is None
    assert set(res.kpis) == {"wheel_l", "wheel_r"}
    assert any("hip_l.torque_cmd" in n for n in res.notes)


def test_a_single_sample_run_has_no_thermal_load() -> None:
    frame = pd.DataFrame({"t": [0.0], "wheel_l.torque_cmd": [9.9]})
    res = detect_saturation(frame, _profile(Actuator("wheel_l", "wheel", "l", 10.0, 4.0)))
    # One sample spans no time: no share, no RMS, and no event (shorter than min_duration_s).
    assert res.kpis["wheel_l"]["saturated_share"] is None
    assert res.kpis["wheel_l"]["torque_rms_worst"] is None
    assert res.events == []


def test_empty_frame_is_skipped() -> None:
    res = detect_saturation(pd.DataFrame({"t": []}), _profile())
    assert res.skipped is not None and "no samples" in res.skipped


def test_thresholds_argument_overrides_the_profile() -> None:
    # eps 3 N*m: the 15 -> 10 N*m cut still counts, the -12 -> -10 N*m cut no longer does.
    th = replace(Thresholds.defaults(), saturation_eps=3.0)
    res = detect_saturation(_request_frame(), _profile(), th)
    assert [e.peak for e in res.events] == pytest.approx([15.0])
