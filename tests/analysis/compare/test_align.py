"""Tests of course distance, alignment and segmentation (analysis.compare.align, analysis.compare.segments)."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from analysis import catalogue as cat
from analysis.compare.align import align_runs, course_distance, course_trace
from analysis.compare.segments import (
    LEFT,
    RIGHT,
    STRAIGHT,
    block_edges,
    segment_course,
    segments_from_marks,
)
from analysis.errors import CompareError
from tests.analysis.compare_synth import hill_curvature, make_run, profile


def test_distance_of_constant_speed() -> None:
    t = np.arange(0.0, 10.0 + 1e-9, 0.01)
    frame = pd.DataFrame({cat.T: t, cat.VEL_X: np.full(t.size, -1.2)})
    # Analytic: |v| T = 1.2 m/s * 10 s = 12 m, also when driving backwards (|vel_x|)
    assert course_distance(frame)[-1] == pytest.approx(12.0, rel=1e-12)


def test_distance_by_wheel_odometry_adds_pitch_rate() -> None:
    t = np.arange(0.0, 10.0 + 1e-9, 0.01)
    w = np.full(t.size, 10.0)  # rad/s, encoder against the leg
    frame = pd.DataFrame(
        {
            cat.T: t,
            "wheel_l.vel": w,
            "wheel_r.vel": w,
            cat.PITCH_RATE: np.full(t.size, 0.5),
        }
    )
    # Differential drive, v = r (w_l + w_r) / 2 (Siegwart et al. 2011) with the leg's
    # pitch rate added to leg-referenced encoders (angular rates of bodies in plane motion add,
    # Meriam & Kraige, Engineering Mechanics: Dynamics, 2012, ch. 5): 0.09 * 10.5 * 10 s = 9.45 m
    assert course_distance(frame, profile())[-1] == pytest.approx(9.45, rel=1e-12)


def test_distance_needs_a_speed_source() -> None:
    frame = pd.DataFrame({cat.T: [0.0, 1.0], cat.YAW_RATE: [0.0, 0.0]})
    with pytest.raises(CompareError, match="vel_x"):
        course_distance(frame, profile())


def test_alignment_needs_yaw_rate() -> None:
    frame = pd.DataFrame({cat.T: [0.0, 1.0, 2.0], cat.VEL_X: [1.0, 1.0, 1.0]})
    with pytest.raises(CompareError, match="yaw_rate"):
        course_trace(frame)


@pytest.mark.parametrize("skip_m", [0.0, 3.2, 7.75])
def test_alignment_recovers_start_offset(skip_m: float) -> None:
    a = make_run("a", speed=1.5, seed=1, length_m=200.0)
    b = make_run("b", speed=1.1, seed=2, skip_m=skip_m, length_m=180.0)
    al = align_runs(a.frame, b.frame)
    # Known by construction: B starts skip_m metres into the course. 0.1 m is the issue's
    # requirement; the grid is 0.05 m with sub-grid refinement.
    assert al.offset_m == pytest.approx(skip_m, abs=0.1)
    assert al.same_course
    assert al.correlation > 0.9


def test_alignment_absorbs_extra_manoeuvring_at_the_start() -> None:
    a = make_run("a", speed=1.5, seed=1, length_m=200.0)
    b = make_run("b", speed=1.2, seed=2, length_m=180.0)
    # Prepend 4 m of slow zig-zag before B reaches the course start.
    t0 = np.arange(0.0, 8.0, 0.02)
    pre = pd.DataFrame(
        {
            cat.T: t0,
            cat.VEL_X: np.full(t0.size, 0.5),
            cat.YAW_RATE: 0.4 * np.sin(2 * np.pi * t0 / 4.0),
        }
    )
    rest = b.frame[[cat.T, cat.VEL_X, cat.YAW_RATE]].copy()
    rest[cat.T] += 8.0
    frame_b = pd.concat([pre, rest], ignore_index=True)
    al = align_runs(a.frame, frame_b)
    # Known: 0.5 m/s * 8 s = 4 m driven before the course start, so A's course starts at
    # B's 4 m mark (offset -4 m); tolerance as above.
    assert al.offset_m == pytest.approx(-4.0, abs=0.1)
    assert al.same_course


def test_different_courses_are_not_the_same_course() -> None:
    a = make_run("a", length_m=200.0)
    b = make_run("b", seed=3, length_m=200.0, curvature=hill_curvature)
    al = align_runs(a.frame, b.frame)
    assert not al.same_course
    assert "do not look like the same course" in al.reason
    assert "correlate only" in al.reason


def test_very_different_lengths_are_not_the_same_course() -> None:
    a = make_run("a", length_m=240.0)
    b = make_run("b", seed=3, length_m=100.0)
    al = align_runs(a.frame, b.frame)
    assert not al.same_course
    assert "lengths differ" in al.reason


def test_segments_of_a_piecewise_constant_course() -> None:
    x = np.arange(0.0, 40.0 + 1e-9, 0.05)
    k = np.zeros_like(x)
    k[(x >= 10) & (x < 20)] = 0.2
    k[(x >= 30)] = -0.2
    segs = segment_course(x, k)
    assert [s.kind for s in segs] == [STRAIGHT, LEFT, STRAIGHT, RIGHT]
    # Boundaries are placed between grid points: within one grid step (0.05 m).
    assert [s.start_m for s in segs] == pytest.approx([0.0, 10.0, 20.0, 30.0], abs=0.05)
    assert segs[-1].end_m == pytest.approx(40.0)


def test_short_wiggles_merge_into_neighbours() -> None:
    x = np.arange(0.0, 30.0 + 1e-9, 0.05)
    k = np.zeros_like(x)
    k[(x >= 10) & (x < 11)] = 0.2  # 1 m blip, shorter than the 3 m minimum
    segs = segment_course(x, k)
    assert [s.kind for s in segs] == [STRAIGHT]


def test_segments_from_marks_take_kind_from_mean_curvature() -> None:
    x = np.arange(0.0, 40.0 + 1e-9, 0.05)
    k = np.where(x >= 20, 0.2, 0.0)
    segs = segments_from_marks([20.0, 55.0, -3.0], 0.0, 40.0, x, k)
    assert [(s.start_m, s.end_m, s.kind) for s in segs] == [
        (0.0, 20.0, STRAIGHT),
        (20.0, 40.0, LEFT),
    ]


def test_block_edges_cover_each_segment() -> None:
    x = np.arange(0.0, 40.0 + 1e-9, 0.05)
    segs = segments_from_marks([12.0], 0.0, 40.0, x, np.zeros_like(x))
    edges, owner = block_edges(segs, block_m=5.0, min_blocks=5)
    # 12 m -> at least 5 blocks; 28 m -> round(28 / 5) = 6 blocks.
    assert list(np.bincount(owner)) == [5, 6]
    assert edges[0] == 0.0 and edges[-1] == 40.0
    assert 12.0 in edges


@pytest.fixture(scope="module")
def demo_loop():
    from analysis.demo.logs import simulate_run

    return simulate_run(
        "lean-ctl 1.4", seed=5, duration_s=60.0, state_rate_hz=50.0, torque_rate_hz=25.0
    )


@pytest.mark.parametrize("cut_m", [2.5, 6.3])
def test_alignment_of_a_demo_run_cut_and_shifted(demo_loop, cut_m: float) -> None:
    frame = demo_loop.frame
    s = course_distance(frame)
    cut = frame[s >= cut_m].reset_index(drop=True)
    cut[cat.T] = cut[cat.T] - cut[cat.T].iloc[0]
    al = align_runs(frame, cut)
    # Known by construction: the cut run starts where the original had driven cut_m
    # (to within one 50 Hz sample, ~0.03 m at demo speeds); the issue asks for 0.1 m.
    assert al.offset_m == pytest.approx(cut_m, abs=0.1)
    assert al.same_course


def test_demo_runs_of_different_courses_are_refused(demo_loop) -> None:
    from analysis.demo.logs import simulate_run

    hill = simulate_run(
        "lean-ctl 1.4", seed=6, duration_s=60.0, course="gullhaven-hill",
        state_rate_hz=50.0, torque_rate_hz=25.0,
    )  # fmt: skip
    al = align_runs(demo_loop.frame, hill.frame)
    assert not al.same_course
    assert "Per-segment comparison is refused" in al.reason
