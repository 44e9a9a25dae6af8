"""The course map and the envelope of a run read in chunks agree with one pass over it."""

from __future__ import annotations

from collections.abc import Iterator

import numpy as np
import pandas as pd
import pytest

from analysis import catalogue as cat
from analysis.detect.course_map import course_path, course_path_chunks, thin_indices
from analysis.detect.envelope import actuator_envelope, actuator_envelope_chunks
from analysis.profile import Actuator, ComModel, MotorConstants, RobotProfile

MOTOR = MotorConstants(k_t=0.5, k_e=0.5, resistance=1.0, bus_voltage=24.0)


def _profile(reference: str = "ground") -> RobotProfile:
    return RobotProfile(
        name="Marram-2",
        wheel_radius=0.1,
        track_width=0.44,
        mass=20.0,
        com=ComModel("constant", height=0.5),
        wheel_encoder_reference=reference,
        actuators=(
            Actuator("wheel_l", "wheel", "l", peak_torque=10.0, continuous_torque=4.0, motor=MOTOR),
            Actuator("wheel_r", "wheel", "r", peak_torque=10.0, continuous_torque=4.0, motor=MOTOR),
        ),
    )


def _drive(n: int = 6000, seed: int = 5) -> pd.DataFrame:
    """Laps of a loop with a yaw estimate wrapped to (-pi, pi], gaps in yaw and speed."""
    rng = np.random.default_rng(seed)
    t = np.arange(n) * 0.005
    t[3000:] += 2.0  # a logging gap of 2 s
    yaw_rate = 0.9 + 0.4 * np.sin(0.3 * t) + rng.normal(0, 0.01, n)
    yaw = np.angle(np.exp(1j * np.cumsum(yaw_rate) * 0.005))
    yaw[700:1900] = np.nan  # a long yaw gap, across several chunks
    yaw[2500:2503] = np.nan
    yaw[-40:] = np.nan  # no heading at the end: held
    v = 1.0 + 0.3 * np.sin(0.7 * t)
    v[400:430] = np.nan
    w = v / 0.1
    return pd.DataFrame(
        {
            cat.T: t,
            cat.YAW: yaw,
            cat.YAW_RATE: yaw_rate,
            cat.VEL_X: v,
            cat.PITCH_RATE: rng.normal(0, 0.2, n),
            "wheel_l.vel": w + rng.normal(0, 0.5, n),
            "wheel_r.vel": w + rng.normal(0, 0.5, n),
            "wheel_l.torque": 6.0 * np.sin(0.9 * t) + rng.normal(0, 0.3, n),
        }
    )


def _cuts(n: int, sizes: list[int]) -> list[int]:
    cuts, at, k = [0], 0, 0
    while at < n:
        at = min(n, at + sizes[k % len(sizes)])
        cuts.append(at)
        k += 1
    return cuts


def _chunks(frame: pd.DataFrame, sizes: list[int], colour: np.ndarray | None = None):
    cuts = _cuts(len(frame), sizes)

    def gen() -> Iterator[tuple[pd.DataFrame, np.ndarray | None]]:
        for a, b in zip(cuts[:-1], cuts[1:], strict=True):
            yield frame.iloc[a:b].reset_index(drop=True), None if colour is None else colour[a:b]

    return gen


SIZES = [[1, 7, 997], [2500], [6000], [13, 0, 1200, 3]]


@pytest.mark.parametrize("sizes", SIZES)
@pytest.mark.parametrize(
    "drop", [[], [cat.YAW], [cat.YAW, cat.VEL_X]], ids=["yaw", "gyro", "wheels"]
)
def test_the_path_in_chunks_is_the_path_in_one_pass(sizes, drop) -> None:
    frame = _drive().drop(columns=drop)
    profile = _profile("leg")
    whole = course_path(frame, profile)
    assert whole is not None
    at = np.array([-5.0, 0.0, 3.3, 3.3, 14.999, 16.0, 40.0, 500.0])[::-1]  # any order
    colour = np.arange(len(frame), dtype=float)
    got = course_path_chunks(_chunks(frame, sizes, colour), profile, len(frame), at, budget=500)
    assert got is not None
    idx = thin_indices(len(frame), 500)
    # Reference: the one-pass path; running sums in parts differ in rounding only.
    np.testing.assert_allclose(got.t, whole.t[idx], rtol=0, atol=0)
    np.testing.assert_allclose(got.x, whole.x[idx], rtol=1e-9, atol=1e-9)
    np.testing.assert_allclose(got.y, whole.y[idx], rtol=1e-9, atol=1e-9)
    np.testing.assert_array_equal(got.colour, colour[idx])
    np.testing.assert_allclose(got.event_x, np.interp(at, whole.t, whole.x), atol=1e-9)
    np.testing.assert_allclose(got.event_y, np.interp(at, whole.t, whole.y), atol=1e-9)
    assert got.length_m == pytest.approx(whole.distance[-1], rel=1e-12)
    assert (got.heading_source, got.speed_source) == (whole.heading_source, whole.speed_source)


def test_an_empty_yaw_estimate_falls_back_to_the_gyro_in_chunks_too() -> None:
    frame = _drive()
    frame[cat.YAW] = np.nan
    whole = course_path(frame, _profile())
    got = course_path_chunks(_chunks(frame, [999]), _profile(), len(frame), np.zeros(0))
    assert whole is not None and got is not None and got.heading_source == cat.YAW_RATE
    idx = thin_indices(len(frame))
    np.testing.assert_allclose(got.x, whole.x[idx], rtol=1e-9, atol=1e-9)


def test_a_wrong_row_count_is_made_good_and_no_heading_gives_none() -> None:
    frame = _drive()
    whole = course_path(frame, _profile())
    got = course_path_chunks(_chunks(frame, [700]), _profile(), 10, np.zeros(0), budget=300)
    assert whole is not None and got is not None
    np.testing.assert_allclose(got.x, whole.x[thin_indices(len(frame), 300)], atol=1e-9)
    bare = frame.drop(columns=[cat.YAW, cat.YAW_RATE])
    assert course_path_chunks(_chunks(bare, [700]), _profile(), len(frame), np.zeros(0)) is None


@pytest.mark.parametrize("sizes", SIZES)
@pytest.mark.parametrize("window", [(None, None), (3.0, 17.5)])
def test_the_envelope_in_chunks_is_the_envelope_in_one_pass(sizes, window) -> None:
    frame = _drive()
    frame.loc[100:150, "wheel_l.torque"] = np.nan
    t = frame[cat.T].to_numpy()
    sat = np.abs(frame["wheel_l.torque"].to_numpy()) > 5.0
    act = _profile().actuators[0]
    t0, t1 = window
    whole = actuator_envelope(frame, act, saturated=sat, t0=t0, t1=t1, max_marks=50)
    inside = np.ones(len(t), dtype=bool)
    if t0 is not None:
        inside = (t >= t0) & (t <= t1)
    part = frame[inside].reset_index(drop=True)
    got = actuator_envelope_chunks(_chunks(part, sizes, sat[inside]), act, max_marks=50)
    assert whole is not None and got is not None
    for key in ("samples", "torque_source", "peak_abs_torque", "share_above_continuous"):
        assert got[key] == whole[key], key
    # Reference: the one-pass picture; counts per cell add up exactly.
    np.testing.assert_array_equal(got["share"], whole["share"])
    np.testing.assert_array_equal(got["speed_edges"], whole["speed_edges"])
    np.testing.assert_array_equal(got["torque_edges"], whole["torque_edges"])
    assert got["saturated_points"] == whole["saturated_points"]
    assert len(got["saturated_points"]["speed"]) == 50
    np.testing.assert_array_equal(got["lines"]["upper"], whole["lines"]["upper"])


def test_the_envelope_in_chunks_without_a_speed_or_rows() -> None:
    act = _profile().actuators[0]
    frame = _drive()
    assert actuator_envelope_chunks(_chunks(frame.drop(columns="wheel_l.vel"), [999]), act) is None
    assert actuator_envelope_chunks(lambda: iter(()), act) is None
    no_rows = frame.iloc[:0]
    empty = actuator_envelope_chunks(lambda: iter([(no_rows, None)]), act)
    whole = actuator_envelope(no_rows, act)
    assert empty is not None and whole is not None
    assert empty["samples"] == whole["samples"] == 0 and empty["peak_abs_torque"] is None
    np.testing.assert_array_equal(empty["speed_edges"], whole["speed_edges"])
