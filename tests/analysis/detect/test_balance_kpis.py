"""Balance KPIs through ``detect_balance`` on two falls of opposite sign (issue 18).

Thresholds are the profile defaults: pitch_limit 20 deg, fall_pitch 45 deg,
exit of an excursion at 0.9 * 20 = 18 deg, min_duration_s 0.05 s.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from analysis import catalogue as cat
from analysis.detect.balance import REASON_FALL_PITCH, detect_balance
from analysis.profile import RobotProfile, profile_from_dict

DT = 0.01  # s, 100 Hz log


def _profile() -> RobotProfile:
    wheel = {"peak_torque_nm": 10.0, "continuous_torque_nm": 5.0, "role": "wheel"}
    return profile_from_dict(
        {
            "robot": {
                "name": "Marram-2",
                "wheel_radius_m": 0.1,
                "track_width_m": 0.4,
                "mass_kg": 20.0,
                "wheel_encoder_reference": "leg",
            },
            "com": {"model": "constant", "height_m": 0.5},
            "actuators": {
                "wheel_l": {**wheel, "side": "left"},
                "wheel_r": {**wheel, "side": "right"},
            },
        }
    )


def test_two_falls_nose_up_then_nose_down() -> None:
    t = np.arange(800) * DT
    # Nose up past -45 deg (to -60) for 0.5 s at 1 s, up again; nose down past +45 deg (to
    # +50) for 0.3 s at 4 s, up again; otherwise 3 deg nose down. Pitch positive nose down.
    pitch_deg = np.select(
        [(t >= 0.995) & (t < 1.495), (t >= 3.995) & (t < 4.295)], [-60.0, 50.0], 3.0
    )
    frame = pd.DataFrame({cat.T: t, cat.PITCH: np.deg2rad(pitch_deg)})
    res = detect_balance(frame, _profile())
    falls = [e for e in res.events if e.kind == cat.FALL]
    # By construction of the traces: each fall spans the samples beyond 45 deg; the peaks keep
    # their sign, and the first fall sets fall_time_s.
    assert [(e.start_s, e.end_s) for e in falls] == [
        pytest.approx((1.0, 1.49), abs=1e-12),
        pytest.approx((4.0, 4.29), abs=1e-12),
    ]
    assert [e.peak for e in falls] == pytest.approx(np.deg2rad([-60.0, 50.0]), abs=1e-12)
    assert [e.detail["direction"] for e in falls] == ["nose_up", "nose_down"]
    k = res.kpis
    assert (k["fell"], k["fall_count"]) == (True, 2)
    assert k["fall_time_s"] == pytest.approx(1.0, abs=1e-12)
    assert k["fall_reason"] == [REASON_FALL_PITCH]
    # Largest magnitude is the nose-up -60 deg, not the largest signed +50 deg.
    assert k["max_abs_pitch"] == pytest.approx(np.deg2rad(60.0), abs=1e-12)
    # Both falls are also excursions beyond 20 deg; the second starts after the first fall.
    assert (k["excursion_count"], k["excursions_after_fall"]) == (2, 1)
