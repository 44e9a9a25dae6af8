"""Replicate units: Welch's interval over units, a degenerate side, lap-like units."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from analysis.compare.bootstrap import BETTER, Pieces, Statistic
from analysis.compare.compare import compare_runs
from analysis.compare.replicates import (
    ReplicateUnit,
    basis_text,
    unit_values,
    welch_difference,
)
from analysis.errors import CompareError
from tests.analysis.compare_synth import make_run


def test_welch_interval_and_p_match_scipy() -> None:
    a = np.array([0.0121, 0.0127, 0.0119, 0.0124])
    b = np.array([0.0102, 0.0111, 0.0098])
    d = welch_difference(a, b, 0.95)
    # scipy.stats.ttest_ind(equal_var=False) is Welch's test (Welch 1947) with
    # Satterthwaite's degrees of freedom; same formula, so float rounding only.
    ref = stats.ttest_ind(b, a, equal_var=False)
    ci = ref.confidence_interval(0.95)
    assert d.diff == pytest.approx(b.mean() - a.mean(), rel=1e-12)
    assert d.p == pytest.approx(ref.pvalue, rel=1e-9)
    assert (d.low, d.high) == pytest.approx((ci.low, ci.high), rel=1e-9)


def test_a_side_without_spread_still_gets_an_interval() -> None:
    # Saturated share per run: A saturates a little in every run, B never does.
    a = np.array([0.0095, 0.0098, 0.0093])
    b = np.zeros(3)
    d = welch_difference(a, b, 0.95)
    # With s_B = 0 Welch's interval is Student's one-sample interval of A with n_A - 1
    # degrees of freedom (Welch 1947); scipy.stats.ttest_1samp gives that one.
    one = stats.ttest_1samp(a, 0.0)
    ci = one.confidence_interval(0.95)
    assert (d.low, d.high) == pytest.approx((-ci.high, -ci.low), rel=1e-9)
    assert d.p == pytest.approx(one.pvalue, rel=1e-9)
    assert d.high < 0


def test_no_spread_on_either_side() -> None:
    same = welch_difference(np.zeros(3), np.zeros(3), 0.95)
    assert (same.low, same.high, same.p) == (0.0, 0.0, 1.0)
    apart = welch_difference(np.zeros(3), np.ones(3), 0.95)
    assert np.isnan(apart.low) and np.isnan(apart.p)
    one = welch_difference(np.array([1.0]), np.array([1.0, 2.0]), 0.95)
    assert np.isnan(one.low) and np.isnan(one.p)


def test_unit_values_are_each_units_own_kpi() -> None:
    pieces = Pieces({"x": np.array([[1.0, 2.0], [3.0, 5.0]]), "t": np.ones((2, 2))}, 2, 2)
    # Hand arithmetic: unit 1 has sum 3 over time 2, unit 2 sum 8 over time 2.
    np.testing.assert_allclose(unit_values(Statistic("ratio", "x", "t"), pieces), [1.5, 4.0])
    np.testing.assert_allclose(unit_values(Statistic("total", "x"), pieces), [3.0, 8.0])


def test_basis_words() -> None:
    assert basis_text(3, 3) == "3 runs per version"
    assert basis_text(1, 1) == "1 run per version: within-run spread only"
    assert basis_text(4, 1, "lap") == "1 lap of B: within-lap spread only"


def test_saturation_zero_in_every_b_run_is_called() -> None:
    # The synthetic runs saturate wheel_l in the tight curves; B's series is zeroed.
    runs_a = [make_run(f"a{i}", seed=30 + i) for i in range(3)]
    runs_b = [make_run(f"b{i}", seed=40 + i) for i in range(3)]
    for r in runs_b:
        r.series["wheel_l.saturated"] = 0.0
    comp = compare_runs(runs_a, runs_b, n_boot=100)
    row = comp.kpi("wheel_l.saturation_share")
    assert row.b == 0.0 and row.a > 0.0
    assert row.verdict == BETTER


def test_a_unit_needs_one_position_per_sample() -> None:
    run = make_run("a", seed=1)
    with pytest.raises(CompareError, match="one course position per frame sample"):
        ReplicateUnit(run, np.zeros(3), "a")
    with pytest.raises(CompareError, match="Unknown replicate unit"):
        ReplicateUnit(run, np.zeros(len(run.frame)), "a", kind="block")


def test_samples_outside_a_unit_count_in_no_block() -> None:
    # A lap is a unit whose positions are NaN outside it: its blocks hold only its samples.
    from analysis.compare.course_kpis import block_pieces, kpi_definitions
    from analysis.metrics import sample_durations

    run = make_run("a", seed=1)
    t = run.frame["t"].to_numpy()
    pos = np.linspace(0.0, 100.0, t.size)
    lap = np.where(pos < 50.0, pos, np.nan)
    edges = np.linspace(0.0, 100.0, 11)
    speed = np.ones(t.size)
    kdefs = kpi_definitions([run], None)
    whole = block_pieces(run, pos, speed, edges, kdefs)
    half = block_pieces(run, lap, speed, edges, kdefs)
    # Same sample durations (trapezoid weights) in the first five blocks, none after.
    np.testing.assert_allclose(half["time"][:4], whole["time"][:4])
    assert half["time"][5:].sum() == 0.0
    assert half["time"].sum() == pytest.approx(sample_durations(t)[pos < 50.0].sum(), rel=1e-9)
