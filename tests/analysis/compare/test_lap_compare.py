"""Tests of the lap-by-lap comparison of multi-lap runs (analysis.compare.lap_compare)."""

from __future__ import annotations

import numpy as np
import pytest

from analysis import catalogue as cat
from analysis.compare.bootstrap import BETTER, NO_CLEAR, NO_VERDICT
from analysis.compare.compare import RunData, compare_runs
from analysis.compare.gate import check_gate, gate_from_mapping
from analysis.demo.logs import demo_profile
from analysis.errors import CompareError
from tests.analysis.compare_synth import make_run
from tests.analysis.lap_runs import DISTURBED, analysed

N_BOOT = 500  # fewer replicates than the default keeps the tests quick


def _run_data(which: str) -> RunData:
    run, result = analysed(which)
    meta = {"name": which, "course": "gullhaven-ring", "controller": run.run.controller}
    return RunData(which, run.run.frame, result.series, result.events, demo_profile(), meta)


@pytest.fixture(scope="module")
def comparison():
    return compare_runs([_run_data("baseline")], [_run_data("steady")], n_boot=N_BOOT)


def _true_per_lap(which: str, name: str, how) -> np.ndarray:
    """A per-lap value from the generator's own true series and lap truth."""
    run, _ = analysed(which)
    ts = run.run.true_series
    t = ts[cat.T].to_numpy()
    out = []
    for lap in run.laps:
        sel = (t >= lap.start_s) & (t < lap.end_s)
        out.append(how(t[sel], ts[name].to_numpy()[sel]))
    return np.array(out)


def test_multi_lap_runs_are_compared_lap_by_lap(comparison) -> None:
    assert comparison.same_course and comparison.refusal is None
    assert comparison.settings["resampling"] == "whole laps, each version's laps pooled"
    # The course is one lap: segments cover the reference lap from its start line
    assert comparison.segments[0].start_m == 0.0
    assert comparison.segments[-1].end_m == pytest.approx(comparison.laps["course_m"])
    assert len(comparison.segments) >= 6  # the ring has 4 curves and 4 straights
    laps = comparison.laps
    assert set(laps["runs"]) == {"baseline", "steady"}
    assert len(laps["by_lap"]) == 8
    assert all(len(r["kpis"]) == 8 for r in laps["runs"].values())


def test_verdicts_agree_with_the_generator(comparison) -> None:
    # Truth: controller 2.0 feeds the roll reference rate forward (demo/course.py,
    # roll_ff = 1 against 0), so roll follows its reference with less lag
    assert comparison.kpi("roll_lag").verdict == BETTER
    # Truth: both versions drove the same target speeds (0.5 % random lap factors)
    row = comparison.kpi("time_to_complete")
    assert row.verdict == NO_CLEAR
    true_a_t = [lap.end_s - lap.start_s for lap in analysed("baseline")[0].laps]
    true_b_t = [lap.end_s - lap.start_s for lap in analysed("steady")[0].laps]
    # per-lap mean lap time, within the bootstrap interval (lap 1 includes the standing start)
    assert row.low <= np.mean(true_b_t) - np.mean(true_a_t) <= row.high
    assert row.a == pytest.approx(np.mean(true_a_t), abs=0.3)


def test_a_run_compared_with_itself_lap_by_lap_shows_no_difference() -> None:
    run = _run_data("steady")
    comp = compare_runs([run], [run], n_boot=N_BOOT)
    assert comp.laps is not None
    for row in comp.kpis + [r for rows in comp.segment_kpis.values() for r in rows]:
        # Identity: a run minus itself is 0 and its interval cannot exclude 0
        assert row.diff == 0.0 or (np.isnan(row.a) and np.isnan(row.b)), row.key
        # Indicative extremes (peak slip speed, ...) get no verdict at all (issue 13 item 3).
        assert row.verdict in (NO_CLEAR, NO_VERDICT), row.key


def test_disturbed_lap_shows_in_the_per_lap_table(comparison) -> None:
    by_lap = {e["lap"]: e["kpis"] for e in comparison.laps["by_lap"]}
    worst = min(by_lap, key=lambda n: by_lap[n]["min_tip_margin"]["b"])
    # Truth: the generator shoves the robot on lap DISTURBED of both runs
    assert worst == DISTURBED


def test_single_lap_runs_are_compared_whole_as_before() -> None:
    comp = compare_runs([make_run("a", seed=1)], [make_run("b", seed=2)], n_boot=N_BOOT)
    assert comp.laps is None
    assert "laps" not in comp.settings["resampling"]


def test_laps_can_be_switched_off() -> None:
    a = _run_data("baseline")
    comp = compare_runs([a], [a], n_boot=N_BOOT, laps=False)
    assert comp.laps is None


def test_multi_lap_against_a_run_of_another_course_is_refused() -> None:
    other = make_run("hill", seed=3, length_m=300.0, course=None)
    comp = compare_runs([_run_data("baseline")], [other], n_boot=N_BOOT)
    assert not comp.same_course
    assert "complete laps" in comp.refusal or "not laps of one loop" in comp.refusal


def test_drift_gate(comparison) -> None:
    drift_b = RunData("drift", *_drift_parts())
    comp = compare_runs([_run_data("baseline")], [drift_b], n_boot=N_BOOT)
    gate = gate_from_mapping({"lap_time_drift_max": 1.0, "roll_error_rms_drift_max": 0.01})
    checks = {c.rule: c for c in check_gate(comp, gate)}
    # Truth: the generator slows every lap by 1 % (about 0.55 s a lap), far beyond 1 s
    # over 8 laps, and plants no drift in the roll error
    assert checks["lap_time_drift_max"].broken
    assert "drifts rising (worse)" in checks["lap_time_drift_max"].message
    assert not checks["roll_error_rms_drift_max"].broken
    # The steady candidate passes the same gate
    assert not any(c.broken for c in check_gate(comparison, gate))


def _drift_parts():
    run, result = analysed("drift")
    meta = {"name": "drift", "course": "gullhaven-ring", "controller": run.run.controller}
    return run.run.frame, result.series, result.events, demo_profile(), meta


def test_drift_gate_cannot_pass_on_runs_that_are_not_laps() -> None:
    comp = compare_runs([make_run("a", seed=1)], [make_run("b", seed=2)], n_boot=N_BOOT)
    (check,) = check_gate(comp, gate_from_mapping({"energy_drift_max": 5.0}))
    assert check.broken and "not lap by lap" in check.message


@pytest.mark.parametrize(
    ("table", "message"),
    [
        ({"lap_time_drift_max": -1.0}, "must be >= 0"),
        ({"speed_drift_max": 1.0}, "unknown gate key"),
    ],
)
def test_bad_drift_keys_are_refused(table, message) -> None:
    with pytest.raises(CompareError, match=message):
        gate_from_mapping(table)


def test_stored_start_line_moves_every_run_s_laps() -> None:
    a, b = _run_data("baseline"), _run_data("steady")
    comp = compare_runs([a], [b], n_boot=N_BOOT, lap_start_m=30.0)
    assert comp.same_course
    for rid in ("baseline", "steady"):
        laps = comp.laps["runs"][rid]["laps"]
        # 30 m (odometry) before the line are a partial first lap in both runs: B's laps
        # are matched on A's lap that starts at the line
        assert laps[0]["partial"] and laps[0]["end_m"] == pytest.approx(30.0, abs=1.0)
