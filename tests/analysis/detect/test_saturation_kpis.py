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
