"""Tests of lap detection on closed loops (analysis.laps) with multi-lap demo runs."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from analysis import catalogue as cat
from analysis.demo.laps import ODOMETRY_SCALE, simulate_laps
from analysis.demo.logs import simulate_run
from analysis.errors import CompareError
from analysis.laps import detect_laps, lap_of_samples, lap_units
from tests.analysis.compare_synth import make_run
from tests.analysis.lap_runs import RATES, drift_run, steady_run

#: Boundary tolerance along the course: the curvature is smoothed over 1 m and put on
#: a 5 cm grid, and the odometry of the demo is 0.4 % long (0.4 m a lap). [m]
BOUNDARY_TOL_M = 1.0


def _true_distance_at(run, times: np.ndarray) -> np.ndarray:
    ts = run.run.true_series
    return np.interp(times, ts[cat.T].to_numpy(), ts["distance"].to_numpy())


@pytest.mark.parametrize("make", [drift_run, steady_run], ids=["drift", "steady"])
def test_every_lap_is_found_at_the_true_start_line(make) -> None:
    run = make()
    found = detect_laps(run.run.frame)
    assert len(found.laps) == len(run.laps) == 8
    assert not any(lap.partial for lap in found.laps)
    starts = np.array([lap.start_s for lap in found.laps] + [found.laps[-1].end_s])
    # Truth: the simulator's own distance; lap k starts at (k - 1) times the ring length
    expected = run.lap_length_m * np.arange(starts.size)
    assert np.abs(_true_distance_at(run, starts) - expected).max() <= BOUNDARY_TOL_M
    # Interior crossings at speed: time within 0.5 s (1 m at about 2 m/s)
    true_starts = np.array([lap.start_s for lap in run.laps])
    assert np.abs(starts[1:-1] - true_starts[1:]).max() <= 0.5


def test_lap_length_is_the_odometry_length_of_the_ring() -> None:
    run = drift_run()
    found = detect_laps(run.run.frame)
    # Truth: ring length times the demo's odometry scale error; 0.3 m for the
    # speed estimate's lever-arm terms in curves (v_base is not the contact speed)
    assert found.lap_length_m == pytest.approx(run.lap_length_m * ODOMETRY_SCALE, abs=0.3)
    for lap in found.laps:
        assert lap.duration_s == pytest.approx(lap.end_s - lap.start_s)
        assert lap.length_m == pytest.approx(found.lap_length_m, abs=BOUNDARY_TOL_M)


def test_drift_does_not_accumulate_over_the_run() -> None:
    run = drift_run()
    found = detect_laps(run.run.frame)
    # A single global lap length from odometry would put the 8th crossing at 7 x the
    # first lap's length; the per-lap matches stay on the true start line instead.
    last = found.laps[-1].start_s
    assert abs(_true_distance_at(run, np.array([last]))[0] - 7 * run.lap_length_m) <= BOUNDARY_TOL_M


def test_approach_on_a_straight_moves_the_start_line_unless_it_is_given() -> None:
    run = simulate_laps("lean-ctl 2.0", laps=4, seed=8, start_offset_m=6.0, **RATES)
    # A straight approach has the curvature of the start straight it leads into, so the
    # course shape cannot place the line: by default it is where the run starts, and the
    # 6 m past the last full lap are a partial last lap.
    found = detect_laps(run.run.frame)
    assert [lap.partial for lap in found.laps] == [False] * 4 + [True]
    assert found.laps[-1].length_m == pytest.approx(6.0 * ODOMETRY_SCALE, abs=BOUNDARY_TOL_M)
    # With the start line given 6 m (odometry) from the start, the approach is a partial
    # first lap and the crossings are the true lap starts.
    given = detect_laps(run.run.frame, start_m=6.0 * ODOMETRY_SCALE)
    assert [lap.partial for lap in given.laps] == [True] + [False] * 4
    assert given.laps[0].start_s == 0.0
    at = _true_distance_at(run, np.array([lap.start_s for lap in given.complete]))
    # Truth: lap k starts at (k - 1) ring lengths of the simulator's distance
    assert np.abs(at - run.lap_length_m * np.arange(4)).max() <= BOUNDARY_TOL_M


def test_run_cut_mid_lap_ends_with_a_partial_lap() -> None:
    run = simulate_laps("lean-ctl 2.0", laps=5, seed=9, duration_s=200.0, **RATES)
    found = detect_laps(run.run.frame)
    assert found.laps[-1].partial
    assert found.laps[-1].end_s == pytest.approx(float(run.run.frame[cat.T].iloc[-1]))
    complete = found.complete
    # Truth: 200 s at about 57 s a lap holds 3 whole laps
    assert len(complete) == 3


def test_a_single_lap_course_has_no_laps() -> None:
    run = simulate_run("lean-ctl 2.0", seed=1, state_rate_hz=100.0, torque_rate_hz=50.0)
    found = detect_laps(run.frame)
    assert found.laps == []
    assert "does not repeat" in found.reason or "less than one lap" in found.reason


def test_run_without_yaw_rate_has_no_laps_and_says_why() -> None:
    t = np.arange(0.0, 10.0, 0.01)
    found = detect_laps(pd.DataFrame({cat.T: t, cat.VEL_X: np.ones(t.size)}))
    assert found.laps == [] and cat.YAW_RATE in found.reason


def test_start_line_given_as_a_distance() -> None:
    run = steady_run()
    found = detect_laps(run.run.frame, start_m=30.0)
    assert found.method == "start line"
    assert found.laps[0].partial and found.laps[0].end_m == pytest.approx(30.0, abs=0.05)
    # Every later crossing is 30 m (odometry) past a true lap start
    at = _true_distance_at(run, np.array([lap.start_s for lap in found.laps[1:]]))
    phase = (at - 30.0 / ODOMETRY_SCALE) % run.lap_length_m
    assert np.all(np.minimum(phase, run.lap_length_m - phase) <= BOUNDARY_TOL_M)


def test_start_line_off_the_run_is_an_error() -> None:
    with pytest.raises(CompareError, match="start line must lie on the run"):
        detect_laps(steady_run().run.frame, start_m=-5.0)


def test_laps_of_another_run_follow_the_reference_template() -> None:
    ref = detect_laps(drift_run().run.frame)
    other = simulate_laps("lean-ctl 1.4", laps=4, seed=10, start_offset_m=9.0, **RATES)
    found = detect_laps(other.run.frame, template=ref.template)
    assert found.laps[0].partial and len(found.complete) == 4
    # Truth: the other run's crossings are at its own true lap starts
    at = _true_distance_at(other, np.array([lap.start_s for lap in found.complete]))
    assert np.abs(at - other.lap_length_m * np.arange(4)).max() <= BOUNDARY_TOL_M


def test_lap_units_split_the_samples_of_complete_laps() -> None:
    run = simulate_laps("lean-ctl 2.0", laps=4, seed=8, start_offset_m=6.0, **RATES)
    t = run.run.frame[cat.T].to_numpy()
    found = detect_laps(run.run.frame)
    units = lap_units(t, found.laps)
    assert len(units) == 4 and found.laps[-1].partial
    idx = lap_of_samples(t, found.laps)
    for unit, lap in zip(units, found.complete, strict=True):
        assert np.all(t[unit] >= lap.start_s) and np.all(t[unit] <= lap.end_s)
        assert np.all(np.diff(unit) == 1)
    assert sum(u.size for u in units) + np.count_nonzero(idx == 4) == t.size


def test_halves_alike_in_form_only_are_not_laps() -> None:
    # The invented loop of the compare tests: its second half has curves of the same
    # sides and rhythm as the first but other radii (0.2 against 0.12 rad/m), so the
    # shape correlates 0.83 with itself half a course on, in form only.
    run = make_run("a", seed=1)
    found = detect_laps(run.frame)
    assert found.laps == [] and "in form only" in found.reason


def test_a_far_time_stamp_gives_no_laps_not_a_huge_grid() -> None:
    t = np.arange(0.0, 30.0, 0.01)
    t[-1] = 9.8e10  # one far-off stamp: 9.8e10 m of "distance" at 1 m/s
    frame = pd.DataFrame({cat.T: t, cat.VEL_X: np.ones(t.size), cat.YAW_RATE: np.zeros(t.size)})
    found = detect_laps(frame)
    assert found.laps == [] and "time stamps" in found.reason
