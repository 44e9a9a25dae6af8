"""Tests of the block bootstrap (analysis.compare.bootstrap) against scipy.stats.bootstrap and closed forms."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from analysis.compare.bootstrap import (
    BETTER,
    NO_CLEAR,
    WORSE,
    Pieces,
    Statistic,
    bootstrap_difference,
    bootstrap_runs,
    evaluate,
    paired_indices,
    verdict,
)
from analysis.errors import CompareError


def _pieces(**arrays: np.ndarray) -> Pieces:
    data = {k: np.atleast_2d(v) for k, v in arrays.items()}
    first = next(iter(data.values()))
    return Pieces(data, first.shape[0], first.shape[1])


def _rms_blocks(rng: np.random.Generator, n: int, sigma: float) -> tuple[np.ndarray, np.ndarray]:
    """Per-block (sum of e^2 dt, time) of n blocks with uneven lengths."""
    time = rng.uniform(2.0, 6.0, n)
    e2 = time * sigma**2 * rng.chisquare(8, n) / 8
    return e2, time


def test_paired_interval_agrees_with_scipy_bootstrap() -> None:
    rng = np.random.default_rng(11)
    e2_a, time_a = _rms_blocks(rng, 40, 0.010)
    e2_b, time_b = _rms_blocks(rng, 40, 0.012)
    stat = Statistic("rms", "e2", "time")
    n_boot = 20000
    ours = bootstrap_difference(
        stat,
        _pieces(e2=e2_a, time=time_a),
        _pieces(e2=e2_b, time=time_b),
        paired=True,
        rng=np.random.default_rng(1),
        n_boot=n_boot,
    )

    def rms_diff(ea, ta, eb, tb, axis=-1):
        return np.sqrt(eb.sum(axis) / tb.sum(axis)) - np.sqrt(ea.sum(axis) / ta.sum(axis))

    ref = stats.bootstrap(
        (e2_a, time_a, e2_b, time_b),
        rms_diff,
        paired=True,
        vectorized=True,
        n_resamples=n_boot,
        confidence_level=0.95,
        method="percentile",
        random_state=np.random.default_rng(2),
    )
    width = ref.confidence_interval.high - ref.confidence_interval.low
    # Reference library: scipy.stats.bootstrap, paired, percentile method. Both are Monte-Carlo
    # estimates of the same percentiles with 20000 replicates: the standard error of a 2.5%
    # quantile is then about 0.5% of the interval width (normal approximation), so two
    # independent runs differ by ~0.7% of the width; 5% allows 7 standard deviations.
    assert ours.low == pytest.approx(ref.confidence_interval.low, abs=0.05 * width)
    assert ours.high == pytest.approx(ref.confidence_interval.high, abs=0.05 * width)
    # The point estimate is the statistic on the full sample (no resampling).
    assert ours.diff == pytest.approx(rms_diff(e2_a, time_a, e2_b, time_b), rel=1e-12)


def test_independent_interval_agrees_with_scipy_bootstrap() -> None:
    rng = np.random.default_rng(5)
    xa = rng.gamma(2.0, 1.0, 30)
    xb = rng.gamma(2.0, 1.3, 45)
    stat = Statistic("total", "x")
    ours = bootstrap_difference(
        stat, _pieces(x=xa), _pieces(x=xb), paired=False, rng=np.random.default_rng(3),
        n_boot=20000,
    )  # fmt: skip
    ref = stats.bootstrap(
        (xa, xb),
        lambda a, b, axis=-1: b.sum(axis) - a.sum(axis),
        paired=False,
        vectorized=True,
        n_resamples=20000,
        method="percentile",
        random_state=np.random.default_rng(4),
    )
    width = ref.confidence_interval.high - ref.confidence_interval.low
    # Reference library: scipy.stats.bootstrap (independent samples, percentile); Monte-Carlo
    # tolerance as in the paired test.
    assert ours.low == pytest.approx(ref.confidence_interval.low, abs=0.05 * width)
    assert ours.high == pytest.approx(ref.confidence_interval.high, abs=0.05 * width)


def test_same_pieces_paired_give_a_zero_interval() -> None:
    rng = np.random.default_rng(0)
    e2, time = _rms_blocks(rng, 20, 0.01)
    p = _pieces(e2=e2, time=time)
    d = bootstrap_difference(
        Statistic("rms", "e2", "time"), p, p, paired=True, rng=np.random.default_rng(0)
    )
    # Identical samples drawn with identical indices: every replicate difference is 0.
    assert (d.diff, d.low, d.high) == (0.0, 0.0, 0.0)
    # ... and no evidence of a difference: p = 1 (both tails hold every replicate).
    assert d.p == 1.0


def test_p_value_matches_the_interval() -> None:
    rng = np.random.default_rng(3)
    x = rng.normal(0.0, 1.0, (1, 40))
    shifted = _pieces(x=x + 2.0, n=np.ones((1, 40)))
    base = _pieces(x=x + rng.normal(0.0, 1.0, (1, 40)), n=np.ones((1, 40)))
    stat = Statistic("ratio", "x", "n")
    far = bootstrap_difference(stat, base, shifted, paired=True, rng=np.random.default_rng(1))
    # Every replicate above 0: p is the Monte-Carlo floor 2 (1 + 0) / (1 + R)
    # (Davison & Hinkley 1997, Monte-Carlo p-value), and the interval excludes 0.
    assert far.low > 0 and far.p == pytest.approx(2.0 / 2001)
    near = bootstrap_difference(stat, base, base, paired=False, rng=np.random.default_rng(1))
    # A sample against itself resampled independently: 0 well inside, p far above 0.05.
    assert near.low < 0 < near.high and near.p > 0.5


def test_statistics_on_the_full_sample_match_numpy() -> None:
    rng = np.random.default_rng(9)
    num, den = rng.uniform(0, 1, 12), rng.uniform(1, 2, 12)
    x = rng.normal(size=12)
    idx = np.arange(12)[None, :]
    p = _pieces(num=num, den=den, x=x)
    # Definitions of the statistics, computed with numpy directly.
    assert evaluate(Statistic("ratio", "num", "den"), p, idx)[0] == pytest.approx(
        num.sum() / den.sum()
    )
    assert evaluate(Statistic("rms", "num", "den"), p, idx)[0] == pytest.approx(
        np.sqrt(num.sum() / den.sum())
    )
    assert evaluate(Statistic("total", "x"), p, idx)[0] == pytest.approx(x.sum())
    assert evaluate(Statistic("max", "x"), p, idx)[0] == x.max()
    assert evaluate(Statistic("min", "x"), p, idx)[0] == x.min()


def test_histogram_quantile_matches_numpy_within_a_bin() -> None:
    rng = np.random.default_rng(2)
    samples = [rng.normal(0.6, 0.1, 300) for _ in range(10)]
    edges = np.linspace(0.0, 1.2, 401)
    hist = np.stack([np.histogram(s, edges)[0] for s in samples]).astype(float)
    p = Pieces({"h": hist[None]}, 1, 10)
    got = evaluate(Statistic("quantile", "h", q=0.01, edges=edges), p, np.arange(10)[None, :])[0]
    # Reference: numpy.quantile on the pooled samples; the histogram resolves one bin
    # (0.003), linear interpolation inside it.
    assert got == pytest.approx(np.quantile(np.concatenate(samples), 0.01), abs=0.003)


def test_total_of_several_runs_is_per_run() -> None:
    x = np.array([[1.0, 2.0, 3.0], [3.0, 4.0, 5.0]])  # two runs, three blocks
    p = Pieces({"x": x}, 2, 3)
    # Per run: (6 + 12) / 2 = 9
    assert evaluate(Statistic("total", "x"), p, np.arange(6)[None, :])[0] == 9.0


def test_paired_indices_share_blocks_between_versions() -> None:
    ia, ib = paired_indices(np.random.default_rng(0), n_blocks=7, n_runs_a=2, n_runs_b=3, n_boot=50)
    assert ia.shape == (50, 14) and ib.shape == (50, 21)
    # Unit index = run * n_blocks + block: both versions draw the same course blocks.
    blocks_a = np.sort(ia % 7, axis=1)
    blocks_b = np.sort(ib % 7, axis=1)
    assert np.array_equal(np.unique(blocks_a[0]), np.unique(blocks_b[0]))


@pytest.mark.parametrize(
    ("low", "high", "better", "expected"),
    [
        (0.1, 0.3, "lower", WORSE),
        (0.1, 0.3, "higher", BETTER),
        (-0.3, -0.1, "lower", BETTER),
        (-0.3, -0.1, "higher", WORSE),
        (-0.1, 0.3, "lower", NO_CLEAR),
        (0.0, 0.0, "lower", NO_CLEAR),
        (float("nan"), float("nan"), "lower", NO_CLEAR),
    ],
)
def test_verdict(low: float, high: float, better: str, expected: str) -> None:
    assert verdict(low, high, better) == expected


def test_too_few_blocks_give_no_interval() -> None:
    p = _pieces(x=np.array([1.0, 2.0, 3.0]))
    d = bootstrap_difference(
        Statistic("total", "x"), p, p, paired=True, rng=np.random.default_rng()
    )
    assert np.isnan(d.low) and np.isnan(d.high)


def test_run_level_bootstrap_needs_two_runs_each() -> None:
    rng = np.random.default_rng(0)
    one = bootstrap_runs(np.array([0.1]), np.array([0.2, 0.3]), rng=rng)
    assert one.diff == pytest.approx(0.15) and np.isnan(one.low)
    two = bootstrap_runs(np.array([0.1, 0.12]), np.array([0.2, 0.22]), rng=rng)
    # Resampled means of two values lie between them: interval within [0.08, 0.12].
    assert 0.08 - 1e-12 <= two.low <= two.high <= 0.12 + 1e-12


def test_unknown_statistic_is_refused() -> None:
    with pytest.raises(CompareError, match="Unknown statistic kind"):
        Statistic("median", "x")
