"""Tests of the Mann-Kendall trend test and the Theil-Sen slope (analysis.trend)."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import stats

from analysis.trend import MIN_N, mann_kendall, mk_statistic, sen_slope


@pytest.mark.parametrize("n", [5, 9, 14, 30])
def test_exact_test_matches_scipy_kendalltau(n: int) -> None:
    rng = np.random.default_rng(n)
    x = rng.normal(size=n) + 0.05 * np.arange(n)
    tr = mann_kendall(x)
    ref = stats.kendalltau(np.arange(n), x, method="exact")
    assert tr.method == "exact"
    # Reference: scipy.stats.kendalltau of the values with their order (tau-b, exact p)
    assert tr.tau == pytest.approx(ref.statistic, abs=1e-12)
    assert tr.p == pytest.approx(ref.pvalue, rel=1e-9)


def test_normal_approximation_with_ties_matches_scipy() -> None:
    rng = np.random.default_rng(7)
    x = np.round(rng.normal(size=57) + 0.01 * np.arange(57), 1)  # many ties
    tr = mann_kendall(x, continuity=False)
    ref = stats.kendalltau(np.arange(57), x, method="asymptotic")
    assert tr.method == "normal"
    # Reference: scipy.stats.kendalltau, asymptotic p with the tie-corrected variance
    # (no continuity correction there, so it is switched off here)
    assert tr.tau == pytest.approx(ref.statistic, abs=1e-12)
    assert tr.p == pytest.approx(ref.pvalue, rel=1e-9)


def test_continuity_correction_moves_z_towards_zero() -> None:
    x = np.round(np.sin(np.arange(40)) + 0.02 * np.arange(40), 1)
    with_c, without = mann_kendall(x), mann_kendall(x, continuity=False)
    # Kendall (1975) Eq. 4.3 with continuity correction: |z| = (|S| - 1) / sqrt(Var S)
    assert abs(with_c.z) == pytest.approx(abs(without.z) * (abs(with_c.s) - 1) / abs(with_c.s))


def test_monotonic_sequence_exact_values() -> None:
    x = np.arange(10.0)
    tr = mann_kendall(x)
    # Analytic: all 45 pairs concordant, S = n(n-1)/2; one permutation of 10! has no
    # inversion and one has all, so the two-sided p is 2 / 10!
    assert tr.s == 45
    assert tr.p == pytest.approx(2.0 / math.factorial(10), rel=1e-12)
    assert mk_statistic(x[::-1]) == -45


def test_sen_slope_matches_scipy_theilslopes() -> None:
    rng = np.random.default_rng(3)
    x = 0.3 * np.arange(25) + rng.standard_t(2, size=25)
    # Reference: scipy.stats.theilslopes (Sen 1968), median of pairwise slopes
    assert sen_slope(x) == pytest.approx(stats.theilslopes(x).slope, rel=1e-12)


def test_nan_values_are_left_out_with_their_place_kept() -> None:
    x = np.array([1.0, np.nan, 3.0, 4.0, np.nan, 6.0, 7.0])
    tr = mann_kendall(x)
    assert tr.n == 5 and tr.s == 10
    # Analytic: values rise by exactly 1 per place, so every pairwise slope is 1
    assert tr.slope == pytest.approx(1.0)


def test_too_few_values_give_no_p() -> None:
    tr = mann_kendall(np.arange(MIN_N - 1, dtype=float))
    assert math.isnan(tr.p) and tr.method == "none"


def test_false_alarm_rate_on_sequences_without_trend() -> None:
    rng = np.random.default_rng(11)
    hits = sum(mann_kendall(rng.normal(size=20)).p < 0.05 for _ in range(2000))
    # The test's size is at most alpha = 0.05 (exact, discrete). Binomial(2000, 0.05) has
    # sd 0.0049; the bounds are about 3 sd either side.
    assert 0.035 <= hits / 2000 <= 0.065


def test_planted_linear_trend_is_found() -> None:
    rng = np.random.default_rng(12)
    found = sum(
        mann_kendall(0.1 * np.arange(30) + rng.normal(size=30)).p < 0.05 for _ in range(200)
    )
    # A slope of 0.1 sd per step over 30 steps is a rise of 3 sd: power is near 1
    # (common practice, no source: a regression test would reject it every time too)
    assert found >= 190
