"""Block bootstrap of the difference of a KPI between two sets of runs.

A KPI of a run is computed from per-block pieces (sums over the block, its
maximum, a histogram), the blocks being stretches of the course (see
:mod:`analysis.compare.segments`). A bootstrap replicate draws blocks with replacement
and recomputes the KPI from the drawn pieces ([1], Section 8.6, the moving-block
idea applied to fixed, non-overlapping blocks); the 95% interval of the
difference B - A is the 2.5th to 97.5th percentile of the replicates ([1],
Eq. 13.5, percentile interval).

When both versions drove the same course the blocks correspond: block k of
every run covers the same stretch. Then each replicate draws the course blocks
once for both versions (paired resampling, so that the course itself cancels
out of the difference) and, for each drawn block, draws runs of each version
with replacement (pooled over runs). Otherwise A and B are resampled
independently from their pooled (run, block) units.

References
----------
.. [1] B. Efron and R. J. Tibshirani, An Introduction to the Bootstrap.
   Chapman & Hall/CRC, 1993. doi:10.1201/9780429246593
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass, field

import numpy as np

from analysis.errors import CompareError

#: Bootstrap replicates by default (Efron & Tibshirani [1], Section 19.3, suggest
#: 1000 or more for percentile intervals).
N_BOOT = 2000
LEVEL = 0.95

BETTER = "better"
WORSE = "worse"
NO_CLEAR = "no clear difference"
#: Verdict of a KPI that is not judged better or worse: an indicative extreme,
#: or a cell whose versions drove at different speeds.
NO_VERDICT = "no verdict"

#: Kinds of KPI statistic and how the drawn pieces combine.
STAT_KINDS = ("ratio", "rms", "total", "max", "min", "quantile")


@dataclass(frozen=True)
class Statistic:
    """How a KPI combines per-block pieces.

    Attributes
    ----------
    kind : str
        ``ratio``: sum(num) / sum(den); ``rms``: sqrt(sum(num) / sum(den));
        ``total``: sum(value) per run (divided by the number of runs);
        ``max`` / ``min``: extreme of the block extremes; ``quantile``: the
        ``q`` quantile of the pooled samples, from per-block histograms.
    num, den : str
        Piece names (``den`` only for ratio and rms; ``num`` is the value otherwise).
    q : float
        Quantile for ``quantile``. [-]
    edges : ndarray
        Histogram bin edges for ``quantile``, in the KPI unit.
    """

    kind: str
    num: str
    den: str | None = None
    q: float = 0.01
    edges: np.ndarray = field(default_factory=lambda: np.zeros(0))

    def __post_init__(self) -> None:
        if self.kind not in STAT_KINDS:
            raise CompareError(f"Unknown statistic kind {self.kind!r}; use one of {STAT_KINDS}.")


@dataclass
class Pieces:
    """Per-block pieces of the runs of one version.

    ``data[name]`` has shape ``(n_runs, n_blocks)`` or, for histograms,
    ``(n_runs, n_blocks, n_bins)``.
    """

    data: dict[str, np.ndarray]
    n_runs: int
    n_blocks: int

    def flat(self, name: str) -> np.ndarray:
        """Piece ``name`` with runs and blocks flattened into units (run-major)."""
        if name not in self.data:
            raise CompareError(f"No per-block piece {name!r}; pieces: {', '.join(self.data)}.")
        x = self.data[name]
        return x.reshape((self.n_runs * self.n_blocks,) + x.shape[2:])

    def subset(self, blocks: np.ndarray) -> Pieces:
        """The pieces of some blocks only (e.g. those of one segment)."""
        blocks = np.asarray(blocks, dtype=int)
        return Pieces({k: v[:, blocks] for k, v in self.data.items()}, self.n_runs, blocks.size)


def paired_indices(
    rng: np.random.Generator, n_blocks: int, n_runs_a: int, n_runs_b: int, n_boot: int
) -> tuple[np.ndarray, np.ndarray]:
    """Unit indices of paired block replicates, pooled over runs.

    Parameters
    ----------
    rng : numpy.random.Generator
        Seeded generator.
    n_blocks : int
        Course blocks shared by every run. [-]
    n_runs_a, n_runs_b : int
        Runs of each version. [-]
    n_boot : int
        Replicates. [-]

    Returns
    -------
    idx_a, idx_b : ndarray of int, shapes (n_boot, n_blocks * n_runs_a) and (n_boot, n_blocks * n_runs_b)
        Indices into the run-major unit arrays of :meth:`Pieces.flat`.
    """
    k = rng.integers(0, n_blocks, size=(n_boot, n_blocks))
    out = []
    for n_runs in (n_runs_a, n_runs_b):
        if n_runs == 1:
            out.append(k.copy())
            continue
        runs = rng.integers(0, n_runs, size=(n_boot, n_blocks, n_runs))
        out.append((runs * n_blocks + k[:, :, None]).reshape(n_boot, n_blocks * n_runs))
    return out[0], out[1]


def independent_indices(rng: np.random.Generator, n_units: int, n_boot: int) -> np.ndarray:
    """Unit indices of an ordinary bootstrap over ``n_units`` pooled units, shape (n_boot, n_units)."""
    return rng.integers(0, n_units, size=(n_boot, n_units))


def _weights(idx: np.ndarray, n_units: int) -> np.ndarray:
    """How often each unit was drawn in each replicate, shape (n_boot, n_units)."""
    w = np.zeros((idx.shape[0], n_units))
    rows = np.repeat(np.arange(idx.shape[0]), idx.shape[1])
    np.add.at(w, (rows, idx.ravel()), 1.0)
    return w


def _hist_quantile(counts: np.ndarray, edges: np.ndarray, q: float) -> np.ndarray:
    """Quantile from histogram counts (rows), linear inside the bin (common practice, no source)."""
    total = counts.sum(axis=1)
    cum = np.cumsum(counts, axis=1)
    target = q * total
    j = np.minimum((cum < target[:, None]).sum(axis=1), counts.shape[1] - 1)
    rows = np.arange(counts.shape[0])
    before = np.where(j > 0, cum[rows, np.maximum(j - 1, 0)], 0.0)
    inside = counts[rows, j]
    frac = np.where(inside > 0, (target - before) / np.where(inside > 0, inside, 1.0), 0.0)
    value = edges[j] + np.clip(frac, 0.0, 1.0) * (edges[j + 1] - edges[j])
    return np.where(total > 0, value, np.nan)


def evaluate(stat: Statistic, pieces: Pieces, idx: np.ndarray) -> np.ndarray:
    """The statistic on each row of drawn units.

    Parameters
    ----------
    stat : Statistic
    pieces : Pieces
        Pieces of one version.
    idx : ndarray of int, shape (n_rows, n_drawn)
        Unit indices (one row per replicate; ``arange`` for the estimate).

    Returns
    -------
    ndarray, shape (n_rows,)
        KPI value per row, in the KPI unit.
    """
    with warnings.catch_warnings(), np.errstate(invalid="ignore", divide="ignore"):
        warnings.simplefilter("ignore", RuntimeWarning)
        if stat.kind in ("ratio", "rms"):
            if stat.den is None:
                raise CompareError(f"Statistic {stat.kind} needs a denominator piece.")
            num = np.nansum(pieces.flat(stat.num)[idx], axis=1)
            den = np.nansum(pieces.flat(stat.den)[idx], axis=1)
            ratio = np.where(den > 0, num / np.where(den > 0, den, 1.0), np.nan)
            return np.sqrt(ratio) if stat.kind == "rms" else ratio
        if stat.kind == "total":
            return np.nansum(pieces.flat(stat.num)[idx], axis=1) / pieces.n_runs
        if stat.kind == "max":
            return np.nanmax(pieces.flat(stat.num)[idx], axis=1)
        if stat.kind == "min":
            return np.nanmin(pieces.flat(stat.num)[idx], axis=1)
        hist = pieces.flat(stat.num)
        counts = _weights(idx, hist.shape[0]) @ hist
        return _hist_quantile(counts, stat.edges, stat.q)


def verdict(low: float, high: float, better: str) -> str:
    """Better, worse or no clear difference, from the interval of B - A.

    Parameters
    ----------
    low, high : float
        Interval of B - A; NaN means no interval.
    better : {"lower", "higher"}
        Which direction of the KPI is better.

    Returns
    -------
    str
        ``better`` or ``worse`` when the whole interval lies on one side of 0
        (0 excluded), else ``no clear difference``.
    """
    if not (np.isfinite(low) and np.isfinite(high)):
        return NO_CLEAR
    if low > 0:
        return BETTER if better == "higher" else WORSE
    if high < 0:
        return BETTER if better == "lower" else WORSE
    return NO_CLEAR


@dataclass(frozen=True)
class Difference:
    """Estimate and interval of one KPI difference.

    Attributes
    ----------
    a, b : float
        KPI of each version (all its runs pooled). [KPI unit]
    diff : float
        ``b - a``. [KPI unit]
    low, high : float
        Percentile interval of ``b - a`` at the chosen level; NaN when there is
        none (too few blocks, or the KPI undefined in too many replicates). [KPI unit]
    n_blocks : int
        Blocks resampled, or the fewer units of a comparison over units. [-]
    p : float
        Two-sided p-value of "no difference" that matches the interval (below
        ``1 - level`` exactly when the interval excludes 0); NaN without one. [-]
    """

    a: float
    b: float
    diff: float
    low: float
    high: float
    n_blocks: int
    p: float = float("nan")


def bootstrap_difference(
    stat: Statistic,
    pieces_a: Pieces,
    pieces_b: Pieces,
    *,
    paired: bool,
    rng: np.random.Generator,
    n_boot: int = N_BOOT,
    level: float = LEVEL,
    min_blocks: int = 5,
) -> Difference:
    """KPI of A and B, their difference, and its percentile block-bootstrap interval.

    Parameters
    ----------
    stat : Statistic
        How the KPI combines pieces.
    pieces_a, pieces_b : Pieces
        Per-block pieces of each version.
    paired : bool
        Blocks correspond (same course, shared boundaries): draw them jointly.
    rng : numpy.random.Generator
        Seeded generator (results are reproducible for one seed).
    n_boot : int
        Replicates. [-]
    level : float
        Confidence level. [-]
    min_blocks : int
        With fewer blocks per run the interval is NaN. [-]

    Returns
    -------
    Difference

    Notes
    -----
    Percentile interval ``[G^-1(alpha), G^-1(1 - alpha)]`` with ``G`` the
    distribution of the replicates of ``b* - a*`` and ``alpha = (1 - level) / 2``
    ([1], Eq. 13.5). Replicates where the KPI is undefined (e.g. no time logged
    in the drawn blocks) are left out; if more than 5% are, there is no interval.
    The p-value inverts the percentile interval: twice the smaller share of
    replicates at or beyond 0 on either side, as ``(1 + count) / (1 + R)``
    (Monte Carlo p-value, [2] Chapter 4), so that it is below ``1 - level``
    about when the interval excludes 0 (achieved significance level, [1]
    Chapter 16; chapters from memory).

    References
    ----------
    .. [2] A. C. Davison and D. V. Hinkley, Bootstrap Methods and their
       Application. Cambridge University Press, 1997. doi:10.1017/CBO9780511802843
    """
    if paired and pieces_a.n_blocks != pieces_b.n_blocks:
        raise CompareError(
            f"Paired resampling needs the same blocks in both versions, found "
            f"{pieces_a.n_blocks} and {pieces_b.n_blocks}."
        )
    ua = np.arange(pieces_a.n_runs * pieces_a.n_blocks)[None, :]
    ub = np.arange(pieces_b.n_runs * pieces_b.n_blocks)[None, :]
    a = float(evaluate(stat, pieces_a, ua)[0])
    b = float(evaluate(stat, pieces_b, ub)[0])
    n_blocks = min(pieces_a.n_blocks, pieces_b.n_blocks)
    nan = float("nan")
    if n_blocks < min_blocks or not (np.isfinite(a) and np.isfinite(b)):
        return Difference(a, b, b - a, nan, nan, n_blocks)
    if paired:
        ia, ib = paired_indices(rng, n_blocks, pieces_a.n_runs, pieces_b.n_runs, n_boot)
    else:
        ia = independent_indices(rng, ua.size, n_boot)
        ib = independent_indices(rng, ub.size, n_boot)
    reps = evaluate(stat, pieces_b, ib) - evaluate(stat, pieces_a, ia)
    ok = np.isfinite(reps)
    if ok.mean() < 0.95:
        return Difference(a, b, b - a, nan, nan, n_blocks)
    alpha = 0.5 * (1.0 - level)
    good = reps[ok]
    low, high = np.percentile(good, [100 * alpha, 100 * (1 - alpha)])  # [1] Eq. 13.5
    tail = min(int(np.sum(good <= 0.0)), int(np.sum(good >= 0.0)))
    p = min(1.0, 2.0 * (1.0 + tail) / (1.0 + good.size))  # [2] Chapter 4
    return Difference(a, b, b - a, float(low), float(high), n_blocks, p=p)


def bootstrap_runs(
    values_a: np.ndarray,
    values_b: np.ndarray,
    *,
    rng: np.random.Generator,
    n_boot: int = N_BOOT,
    level: float = LEVEL,
) -> Difference:
    """Difference of run means with a percentile interval from resampling runs.

    For KPIs that are one number per run (e.g. the roll lag). With fewer than
    two finite runs on either side there is no interval.

    Parameters
    ----------
    values_a, values_b : ndarray
        The KPI of each run of A and of B. [KPI unit]
    rng : numpy.random.Generator
    n_boot : int
    level : float

    Returns
    -------
    Difference
        ``a`` and ``b`` are the means over runs; ``n_blocks`` the fewer runs.
    """
    va = np.asarray(values_a, dtype=float)
    vb = np.asarray(values_b, dtype=float)
    va, vb = va[np.isfinite(va)], vb[np.isfinite(vb)]
    nan = float("nan")
    a = float(va.mean()) if va.size else nan
    b = float(vb.mean()) if vb.size else nan
    n = int(min(va.size, vb.size))
    if n < 2:
        return Difference(a, b, b - a, nan, nan, n)
    reps = vb[rng.integers(0, vb.size, (n_boot, vb.size))].mean(axis=1) - va[
        rng.integers(0, va.size, (n_boot, va.size))
    ].mean(axis=1)
    alpha = 0.5 * (1.0 - level)
    low, high = np.percentile(reps, [100 * alpha, 100 * (1 - alpha)])
    return Difference(a, b, b - a, float(low), float(high), n)
