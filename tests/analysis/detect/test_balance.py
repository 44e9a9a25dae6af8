"""Tests of the balance detector (analysis.detect.balance) on hand-made pitch traces.

Thresholds are the profile defaults: pitch_limit 20 deg, fall_pitch 45 deg,
fall_end_window_s 1 s, min_duration_s 0.05 s, merge_gap_s 0.25 s.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from analysis import catalogue as cat
from analysis.detect.balance import REASON_ENDED_TILTED, REASON_FALL_PITCH, detect_balance
from analysis.events import DetectorResult
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


def _frame(t: np.ndarray, pitch_deg: np.ndarray) -> pd.DataFrame:
    return pd.DataFrame({cat.T: t, cat.PITCH: np.deg2rad(pitch_deg)})


def _kinds(res: DetectorResult) -> list[str]:
    return [e.kind for e in res.events]


def test_excursion_without_fall() -> None:
    t = np.arange(0.0, 6.0, DT)
    pitch = np.where((t >= 2.0) & (t < 2.5), -30.0, 2.0)  # nose up 30 deg for 0.5 s
    res = detect_balance(_frame(t, pitch), _profile())
    # By construction: 30 deg is beyond the 20 deg limit, short of the 45 deg fall angle.
    assert _kinds(res) == [cat.PITCH_EXCURSION]
    ev = res.events[0]
    assert (ev.start_s, round(ev.end_s, 6)) == (2.0, 2.49)
    assert ev.peak == pytest.approx(np.deg2rad(-30.0)) and ev.detail["direction"] == "nose_up"
    assert res.kpis["fell"] is False and res.kpis["fall_time_s"] is None
    assert res.kpis["excursion_count"] == 1
    assert res.kpis["max_abs_pitch"] == pytest.approx(np.deg2rad(30.0))


def test_fall_beyond_recoverable_angle_then_later_events_marked() -> None:
    t = np.arange(0.0, 8.0, DT)
    # Tips forward from 2.5 s (30 deg), past 45 deg at 3 s, lies at 80 deg for 1 s, is
    # picked up and wobbles to 25 deg at 6 s: the later excursion follows from the fall.
    pitch = np.select(
        [t < 2.5, t < 3.0, t < 4.0, (t >= 6.0) & (t < 6.3)], [0.0, 30.0, 80.0, 25.0], 0.0
    )
    res = detect_balance(_frame(t, pitch), _profile())
    falls = [e for e in res.events if e.kind == cat.FALL]
    assert len(falls) == 1
    # By construction: the fall starts where pitch passes 45 deg (3 s), not at the 20 deg
    # limit (2.5 s), and ends when it is back within the limit (last sample before 4 s).
    assert falls[0].end_s == pytest.approx(3.99)
    assert falls[0].start_s == pytest.approx(3.0) and falls[0].detail["reason"] == [
        REASON_FALL_PITCH
    ]
    assert res.kpis["fell"] is True and res.kpis["fall_time_s"] == pytest.approx(3.0)
    assert res.kpis["excursion_count"] == 2 and res.kpis["excursions_after_fall"] == 1


def test_run_ending_tilted_is_a_fall() -> None:
    t = np.arange(0.0, 5.0, DT)
    pitch = np.where(t >= 3.0, 35.0, 0.0)  # beyond the limit, not past 45 deg, to the end
    res = detect_balance(_frame(t, pitch), _profile())
    falls = [e for e in res.events if e.kind == cat.FALL]
    # By construction: 35 deg held for the last 2 s (window 1 s), never past 45 deg.
    assert len(falls) == 1 and falls[0].detail["reason"] == [REASON_ENDED_TILTED]
    assert falls[0].start_s == pytest.approx(3.0) and falls[0].end_s == pytest.approx(t[-1])
    assert res.kpis["fall_time_s"] == pytest.approx(3.0)


def test_short_tilt_at_the_end_is_no_fall() -> None:
    t = np.arange(0.0, 5.0, DT)
    pitch = np.where(t >= 4.5, 35.0, 0.0)  # only the last 0.5 s, window is 1 s
    res = detect_balance(_frame(t, pitch), _profile())
    assert _kinds(res) == [cat.PITCH_EXCURSION] and res.kpis["fell"] is False


def test_fall_that_ends_tilted_is_one_event() -> None:
    t = np.arange(0.0, 5.0, DT)
    pitch = np.clip((t - 2.0) * 90.0, 0.0, 90.0)  # tips over in 1 s, lies flat to the end
    res = detect_balance(_frame(t, pitch), _profile())
    falls = [e for e in res.events if e.kind == cat.FALL]
    assert len(falls) == 1
    assert falls[0].detail["reason"] == [REASON_FALL_PITCH, REASON_ENDED_TILTED]
    # By construction: 45 deg is passed at 2.5 s; the fall lasts to the last sample.
    assert falls[0].start_s == pytest.approx(2.51) and falls[0].end_s == pytest.approx(t[-1])


def test_nan_samples_inside_an_excursion_do_not_split_it() -> None:
    t = np.arange(0.0, 4.0, DT)
    pitch = np.where((t >= 1.0) & (t < 2.0), 30.0, 0.0)
    pitch[140:143] = np.nan  # three lost samples, shorter than the gap rule (5 periods)
    res = detect_balance(_frame(t, pitch), _profile())
    assert _kinds(res) == [cat.PITCH_EXCURSION]
    assert res.events[0].start_s == pytest.approx(1.0) and res.events[0].end_s == pytest.approx(
        1.99
    )


def test_data_gap_is_never_bridged() -> None:
    t = np.concatenate((np.arange(0.0, 2.0, DT), np.arange(2.2, 4.0, DT)))  # 0.2 s hole
    pitch = np.where((t >= 1.5) & (t < 2.5), 30.0, 0.0)
    res = detect_balance(_frame(t, pitch), _profile())
    # The hole (20 periods) is a data gap: two excursions although merge_gap is 0.25 s.
    assert _kinds(res) == [cat.PITCH_EXCURSION, cat.PITCH_EXCURSION]
    assert res.events[0].end_s < 2.0 and res.events[1].start_s >= 2.2


def test_run_shorter_than_the_end_window() -> None:
    t = np.arange(0.0, 0.5, DT)
    tilted = detect_balance(_frame(t, np.full(t.size, 35.0)), _profile())
    # Too short to judge "ended tilted": no fall, and the result says why.
    assert tilted.kpis["fell"] is False
    assert any("fall_end_window_s" in note for note in tilted.notes)
    flat_out = detect_balance(_frame(t, np.full(t.size, 60.0)), _profile())
    # Past the recoverable angle is a fall however short the run.
    assert flat_out.kpis["fell"] is True


def test_skipped_without_pitch() -> None:
    t = np.arange(0.0, 1.0, DT)
    res = detect_balance(pd.DataFrame({cat.T: t, cat.ROLL: np.zeros(t.size)}), _profile())
    assert res.skipped is not None and cat.PITCH in res.skipped
