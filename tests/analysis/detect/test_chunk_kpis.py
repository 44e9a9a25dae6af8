"""The exact low percentile of a chunked run from its lowest values only."""

from __future__ import annotations

import numpy as np
import pytest

from analysis.detect.chunk_kpis import LowestValues, lowest_needed


@pytest.mark.parametrize("n", [1, 2, 3, 99, 100, 101, 102, 201, 1000, 12_345, 250_001])
@pytest.mark.parametrize("q", [1.0, 0.5, 37.0])
def test_percentile_from_the_lowest_values_is_numpys(n, q):
    rng = np.random.default_rng(n)
    values = rng.normal(0.05, 0.02, n)
    values[rng.integers(0, n, n // 10)] = 0.0  # ties, as a margin clipped at 0 has
    upper = n + n // 3  # the run's sample count bounds the valid values from above
    kept = LowestValues(lowest_needed(upper, q))
    for part in np.array_split(values, max(1, n // 997)):
        kept.add(part)
    # numpy.percentile, method "linear", is the reference (bit for bit)
    assert kept.percentile(q) == float(np.percentile(values, q))
    assert kept.count == n
    assert len(kept._parts[0]) <= lowest_needed(upper, q)


def test_too_few_kept_values_are_refused_not_guessed():
    kept = LowestValues(3)
    kept.add(np.arange(1000.0))
    with pytest.raises(ValueError, match="only 3 were kept"):
        kept.percentile(1.0)


def test_no_values_give_nan():
    assert np.isnan(LowestValues(10).percentile(1.0))
