"""Saturation events and KPIs through ``detect_saturation`` (issue 18).

The braking quadrant of the DC-motor torque-speed line and the per-actuator
overrides, checked through the detector rather than through its helpers.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from analysis.detect.saturation import detect_saturation
from analysis.events import Event
from analysis.profile import Actuator, ComModel, MotorConstants, RobotProfile, Thresholds

# Invented motor of the invented robot Marram-2: k_t = k_e = 0.5, R = 1 ohm, V = 24 V.
MOTOR = MotorConstants(k_t=0.5, k_e=0.5, resistance=1.0, bus_voltage=24.0)


def _profile(act: Actuator) -> RobotProfile:
    return RobotProfile(
        name="Marram-2",
        wheel_radius=0.1,
        track_width=0.5,
        mass=20.0,
        com=ComModel("constant", height=0.5),
        wheel_encoder_reference="leg",
        actuators=(act,),
        thresholds=Thresholds.defaults(),
    )


def _spans(events: list[Event]) -> list[float]:
    """Start, end and peak of each event, flattened for pytest.approx."""
    return [x for e in events for x in (e.start_s, e.end_s, e.peak)]


def _t(duration_s: float) -> np.ndarray:
    return np.arange(int(round(duration_s * 100.0))) / 100.0  # 100 Hz


def test_braking_at_speed_is_not_saturation() -> None:
    # Three 1 s stretches at 100 Hz: braking at -5 N*m while turning forward at 30 rad/s,
    # motoring at +5 N*m at 30 rad/s, braking at +5 N*m while turning backward at 30 rad/s.
    t = _t(3.0)
    vel = np.where(t < 2.0, 30.0, -30.0)
    cmd = np.where(t < 1.0, -5.0, 5.0)
    frame = pd.DataFrame({"t": t, "wheel_l.torque_cmd": cmd, "wheel_l.vel": vel})
    act = Actuator("wheel_l", "wheel", "l", peak_torque=10.0, continuous_torque=4.0, motor=MOTOR)
    res = detect_saturation(frame, _profile(act))
    avail = res.series["wheel_l.torque_available"].to_numpy()
    # DC motor equations (Hughes & Drury, Electric Motors and Drives, ch. 3): braking, the
    # back-EMF adds to the bus voltage, 0.5 (24 + 0.5 * 30) / 1 = 19.5 N*m, capped at the
    # 10 N*m peak; motoring 0.5 (24 - 0.5 * 30) / 1 = 4.5 N*m. Exact in floating point.
    assert avail[t < 1.0] == pytest.approx(10.0, abs=1e-12)
    assert avail[(t >= 1.0) & (t < 2.0)] == pytest.approx(4.5, abs=1e-12)
    assert avail[t >= 2.0] == pytest.approx(10.0, abs=1e-12)
    # Only the motoring stretch reaches (1 - 0.02) of its available torque; a detector that
    # judged braking on the motoring line would flag all 3 s.
    assert _spans(res.events) == pytest.approx([1.0, 1.99, 5.0], abs=1e-12)
    k = res.kpis["wheel_l"]
    # Pattern arithmetic (zero-order hold): 100 samples of 10 ms of the 2.99 s logged.
    assert k["saturated_share"] == pytest.approx(1.0 / 2.99, rel=1e-12)
    assert k["event_count"] == 1
    assert k["longest_event_s"] == pytest.approx(0.99, abs=1e-12)


def test_per_actuator_tolerance_overrides_the_threshold() -> None:
    t = _t(1.0)
    # Peak 10 N*m; a command of 9.3 N*m is below the default limit (1 - 0.02) * 10 = 9.8 N*m
    # but above the actuator's own (1 - 0.1) * 10 = 9.0 N*m (the tolerance's definition in
    # the detector's docstring, by construction).
    frame = pd.DataFrame({"t": t, "wheel_l.torque_cmd": np.full(t.size, 9.3)})
    plain = Actuator("wheel_l", "wheel", "l", 10.0, 4.0)
    loose = Actuator("wheel_l", "wheel", "l", 10.0, 4.0, saturation_tol=0.1)
    assert detect_saturation(frame, _profile(plain)).events == []
    res = detect_saturation(frame, _profile(loose))
    assert _spans(res.events) == pytest.approx([0.0, 0.99, 9.3], abs=1e-12)
    assert res.events[0].detail["tol"] == 0.1


def test_per_actuator_eps_overrides_the_threshold() -> None:
    t = _t(1.0)
    # The request is 0.3 N*m above the command: saturation with the default eps of 0.05 N*m,
    # not with the actuator's own 0.5 N*m (eps as defined in the docstring, by construction).
    frame = pd.DataFrame(
        {"t": t, "wheel_l.torque_req": np.full(t.size, 6.3), "wheel_l.torque_cmd": 6.0}
    )
    plain = Actuator("wheel_l", "wheel", "l", 10.0, 4.0)
    wide = Actuator("wheel_l", "wheel", "l", 10.0, 4.0, saturation_eps=0.5)
    assert detect_saturation(frame, _profile(plain)).kpis["wheel_l"]["event_count"] == 1
    assert detect_saturation(frame, _profile(wide)).kpis["wheel_l"]["event_count"] == 0


def test_a_zero_command_beyond_the_no_load_speed_is_not_saturation() -> None:
    t = _t(2.0)
    frame = pd.DataFrame(
        {
            "t": t,
            "wheel_l.torque_cmd": np.where(t < 1.0, 0.0, 0.5),
            "wheel_l.vel": np.full(t.size, 60.0),
        }
    )
    act = Actuator("wheel_l", "wheel", "l", peak_torque=10.0, continuous_torque=4.0, motor=MOTOR)
    res = detect_saturation(frame, _profile(act))
    # DC motor equations (Hughes & Drury, ch. 3): no-load speed V / k_e = 48 rad/s, so at
    # 60 rad/s the drive has no motoring torque left (line floored at 0). Asking nothing is no
    # saturation; asking 0.5 N*m is.
    assert res.series["wheel_l.torque_available"].to_numpy() == pytest.approx(0.0, abs=1e-12)
    assert _spans(res.events) == pytest.approx([1.0, 1.99, 0.5], abs=1e-12)
    # Pattern arithmetic (zero-order hold, the last sample weighs nothing): 99 intervals of
    # 10 ms of the 1.99 s logged.
    assert res.kpis["wheel_l"]["saturated_share"] == pytest.approx(0.99 / 1.99, rel=1e-12)


def test_worst_thermal_window_is_a_full_window() -> None:
    t = _t(30.0)
    # 6 N*m for the first 2 s, then 2 N*m: the early, partly filled windows read 6 N*m, but
    # the thermal KPI compares full 10 s windows only.
    torque = np.where(t < 2.0, 6.0, 2.0)
    frame = pd.DataFrame({"t": t, "wheel_l.torque_cmd": torque})
    res = detect_saturation(frame, _profile(Actuator("wheel_l", "wheel", "l", 10.0, 4.0)))
    k = res.kpis["wheel_l"]
    # The first full window (0, 10 s] holds the most of the 6 N*m stretch. Trapezoid rule by
    # hand: 1.99 s at 36, one 10 ms interval at (36 + 4) / 2, 8 s at 4 (N*m)^2, over 10 s.
    worst = np.sqrt((1.99 * 36.0 + 0.01 * 20.0 + 8.0 * 4.0) / 10.0)
    assert k["torque_rms_worst"] == pytest.approx(worst, rel=1e-9)
    assert k["torque_rms_ratio"] == pytest.approx(worst / 4.0, rel=1e-9)
    assert (k["torque_rms_worst_start_s"], k["torque_rms_worst_end_s"]) == pytest.approx(
        (0.0, 10.0), abs=1e-9
    )
