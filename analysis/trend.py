"""Trend test of a sequence: Mann-Kendall, with the Theil-Sen slope.

Used to tell whether a per-lap KPI drifts over a run (a sagging battery, a
warming motor): the Mann-Kendall test is rank-based, so one odd lap does not
make a trend, and it assumes no distribution of the values.

The statistic is ``S = sum_{i<j} sign(x_j - x_i)`` over the sequence in lap
order ([1]; [2] Ch. 4). Without ties its null distribution is that of
``N - 2 I`` with ``I`` the inversions of a random permutation, ``N = n(n-1)/2``,
which gives an exact p-value for short sequences ([2] Section 4.6); otherwise
the normal approximation with the tie-corrected variance
``Var S = [n(n-1)(2n+5) - sum_t t(t-1)(2t+5)] / 18`` ([2] Eq. 4.3) and a
continuity correction of 1 is used. Kendall's tau-b with the lap number is
``S / sqrt(N (N - T))``, ``T = sum_t t(t-1)/2`` over tied groups ([2] Section 3.8).
The slope is the Theil-Sen estimator, the median of the pairwise slopes
``(x_j - x_i) / (j - i)`` ([3]).

References
----------
.. [1] H. B. Mann, "Nonparametric tests against trend", Econometrica 13(3),
   245-259, 1945. doi:10.2307/1907187
.. [2] M. G. Kendall, Rank Correlation Methods, 4th ed. Charles Griffin, 1975
   (first ed. 1948).
.. [3] P. K. Sen, "Estimates of the regression coefficient based on Kendall's
   tau", J. Am. Stat. Assoc. 63(324), 1379-1389, 1968. doi:10.1080/01621459.1968.10480934
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from functools import lru_cache

import numpy as np

#: Significance level of the drift test, two-sided. [-] (common practice, no source)
ALPHA = 0.05
#: Fewest values a trend is tested on. [-] With 4 values no two-sided exact
#: p-value can fall below 0.083 ([2] tables, from memory), so 5 is the least useful.
MIN_N = 5
#: Up to this many values without ties the exact null distribution is used. [-]
EXACT_MAX_N = 30


@dataclass(frozen=True)
class Trend:
    """Outcome of a Mann-Kendall test on one sequence.

    Attributes
    ----------
    n : int
        Finite values tested. [-]
    s : int
        Mann-Kendall statistic S. [-]
    tau : float
        Kendall's tau-b of the values with their order. [-]
    z : float
        Normal score of S (continuity corrected); NaN when the exact test was used. [-]
    p : float
        Two-sided p-value; NaN with fewer than :data:`MIN_N` values. [-]
    method : str
        ``exact`` or ``normal``.
    slope : float
        Theil-Sen slope per step (per lap). [value unit]
    """

    n: int
    s: int
    tau: float
    z: float
    p: float
    method: str
    slope: float

    def to_dict(self) -> dict[str, object]:
        """JSON shape (NaN becomes None)."""
        out: dict[str, object] = {}
        for k, v in self.__dict__.items():
            out[k] = None if isinstance(v, float) and not math.isfinite(v) else v
        return out


def mk_statistic(x: np.ndarray) -> int:
    """Mann-Kendall S of a sequence: ``sum_{i<j} sign(x_j - x_i)`` ([1], [2] Eq. 4.1)."""
    x = np.asarray(x, dtype=float)
    d = np.sign(x[None, :] - x[:, None])
    return int(np.triu(d, k=1).sum())


def _tie_groups(x: np.ndarray) -> np.ndarray:
    _, counts = np.unique(x, return_counts=True)
    return counts[counts > 1]


@lru_cache(maxsize=64)
def _inversion_counts(n: int) -> np.ndarray:
    """Number of permutations of n items with k inversions, k = 0..n(n-1)/2.

    Recurrence ``c_n(k) = sum_{j=0}^{n-1} c_{n-1}(k - j)`` ([2] Section 4.6).
    """
    counts = np.array([1.0])
    for m in range(2, n + 1):
        new = np.zeros(counts.size + m - 1)
        for j in range(m):
            new[j : j + counts.size] += counts
        counts = new
    counts.flags.writeable = False
    return counts


def _exact_two_sided(n: int, s: int) -> float:
    """P(|S| >= |s|) under H0 without ties, from the inversion counts of permutations."""
    counts = _inversion_counts(n)
    total = counts.sum()
    big_n = n * (n - 1) // 2
    inv = np.arange(counts.size)
    s_of = big_n - 2 * inv
    return float(min(1.0, counts[np.abs(s_of) >= abs(s)].sum() / total))


def sen_slope(x: np.ndarray) -> float:
    """Theil-Sen slope of a sequence against its index: median of pairwise slopes ([3]).

    Parameters
    ----------
    x : ndarray
        Values in order; NaN values are left out with their index kept. [unit]

    Returns
    -------
    float
        Slope per step. [unit per step]; NaN with fewer than two finite values.
    """
    x = np.asarray(x, dtype=float)
    idx = np.flatnonzero(np.isfinite(x))
    if idx.size < 2:
        return float("nan")
    i, j = np.triu_indices(idx.size, k=1)
    return float(np.median((x[idx[j]] - x[idx[i]]) / (idx[j] - idx[i])))


def mann_kendall(x: np.ndarray, *, continuity: bool = True) -> Trend:
    """Mann-Kendall trend test of a sequence in its given order.

    Parameters
    ----------
    x : ndarray
        Values in order (e.g. one per lap); NaN values are left out. [unit]
    continuity : bool
        Apply the continuity correction of 1 to S in the normal approximation.

    Returns
    -------
    Trend

    Notes
    -----
    ``S = sum_{i<j} sign(x_j - x_i)`` ([1]); exact p-value for up to
    :data:`EXACT_MAX_N` values without ties, else ``z = (S - sign(S)) / sqrt(Var S)``
    with ``Var S`` of [2] Eq. 4.3 (tie-corrected) and ``p = 2 (1 - Phi(|z|))``.
    """
    v = np.asarray(x, dtype=float)
    slope = sen_slope(v)
    v = v[np.isfinite(v)]
    n = int(v.size)
    nan = float("nan")
    if n < 2:
        return Trend(n, 0, nan, nan, nan, "none", slope)
    s = mk_statistic(v)
    big_n = n * (n - 1) / 2.0
    ties = _tie_groups(v)
    t_pairs = float((ties * (ties - 1) / 2.0).sum())
    den = math.sqrt(big_n * (big_n - t_pairs))
    tau = s / den if den > 0 else nan  # [2] Section 3.8, tau-b
    if n < MIN_N:
        return Trend(n, s, tau, nan, nan, "none", slope)
    if ties.size == 0 and n <= EXACT_MAX_N:
        return Trend(n, s, tau, nan, _exact_two_sided(n, s), "exact", slope)
    var = (n * (n - 1) * (2 * n + 5) - float((ties * (ties - 1) * (2 * ties + 5)).sum())) / 18.0
    if var <= 0:
        return Trend(n, s, tau, nan, 1.0, "normal", slope)
    c = (1 if continuity else 0) * (1 if s > 0 else -1 if s < 0 else 0)
    z = (s - c) / math.sqrt(var)  # [2] Eq. 4.3
    p = math.erfc(abs(z) / math.sqrt(2.0))  # 2 (1 - Phi(|z|))
    return Trend(n, s, tau, z, p, "normal", slope)
