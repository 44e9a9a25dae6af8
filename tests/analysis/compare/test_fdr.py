"""Benjamini-Hochberg adjusted p-values and calls."""

from __future__ import annotations

import numpy as np
import pytest
from scipy.stats import false_discovery_control

from analysis.compare.fdr import bh_adjust, bh_reject
from analysis.errors import CompareError

# Benjamini & Hochberg 1995, Section 3.2: the 15 p-values of their worked example
# (from memory); at q = 0.05 the procedure rejects the four smallest (Bonferroni three).
BH_EXAMPLE = np.array(
    [0.0001, 0.0004, 0.0019, 0.0095, 0.0201, 0.0278, 0.0298, 0.0344, 0.0459,
     0.3240, 0.4262, 0.5719, 0.6528, 0.7590, 1.0000]
)  # fmt: skip


def test_worked_example_of_the_paper() -> None:
    rejected = bh_reject(BH_EXAMPLE, 0.05)
    assert rejected.tolist() == [True] * 4 + [False] * 11


@pytest.mark.parametrize("seed", range(5))
def test_adjusted_values_match_scipy(seed: int) -> None:
    rng = np.random.default_rng(seed)
    p = rng.uniform(size=40) ** 3
    p[::7] = p[3]  # ties
    # scipy.stats.false_discovery_control(method="bh"), a general-purpose reference;
    # both are the same arithmetic, so only float rounding separates them.
    np.testing.assert_allclose(bh_adjust(p), false_discovery_control(p), rtol=1e-12)


def test_untested_cells_are_left_out_of_the_family() -> None:
    p = np.array([0.01, np.nan, 0.04, np.nan])
    q = bh_adjust(p)
    # Two tests, not four: m = 2 (Benjamini & Hochberg 1995, Section 3).
    np.testing.assert_allclose(q[[0, 2]], false_discovery_control([0.01, 0.04]))
    assert np.isnan(q[[1, 3]]).all()
    assert not bh_reject(np.array([np.nan])).any()


@pytest.mark.parametrize(
    ("p", "q", "message"), [([0.5, 1.2], 0.05, "in \\[0, 1\\]"), ([0.1], 0.0, "between 0 and 1")]
)
def test_bad_input_is_refused(p, q, message) -> None:
    with pytest.raises(CompareError, match=message):
        bh_reject(np.array(p), q)
