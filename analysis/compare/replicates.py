"""Replicate units of a comparison: runs, or laps of runs, and their interval.

The unit that varies with the test conditions (driver, wind, battery, tyre and
ground temperature) is the run, or the lap when a run drives a loop several
times; a 5 m block of one run is not. Blocks of one run share that run's
conditions, so an interval that resamples them shows the spread *within* the
run only; taking them as independent replicates of the versions is
pseudo-replication ([1]). With at least two units of each version the
comparison therefore rests on the units:

- each unit's KPI is computed from its own blocks (:func:`unit_values`);
- the difference is that of the means over units, B - A, and its interval is
  Welch's, with Satterthwaite's degrees of freedom ([2], [3]): it needs the
  spread of one version only, so a version whose KPI does not vary at all (a
  share that is zero in every block of every B unit) still gets an interval
  and a verdict from the spread of the other (its degrees of freedom are then
  that side's ``n - 1``).

Welch's interval is used rather than a percentile bootstrap over units because
with 2 to 5 units the percentile interval is far too narrow: it has the
plug-in variance, ``(n - 1) / n`` of the unbiased one, and normal rather than
Student quantiles (the "narrowness bias" of [4], from memory). The calibration
benchmark ``benchmarks/bench_calibration.py`` measures the result.

A unit is a :class:`ReplicateUnit`: a run and the course position of each of
its samples, NaN outside the unit. A whole run is one unit; a lap is a unit
whose positions are those of its own samples on the course, aligned lap by lap,
and NaN elsewhere, so that lap detection only has to supply positions.

References
----------
.. [1] S. H. Hurlbert, "Pseudoreplication and the design of ecological field
   experiments", Ecological Monographs 54 (1984) 187-211. doi:10.2307/1942661
.. [2] B. L. Welch, "The generalization of 'Student's' problem when several
   different population variances are involved", Biometrika 34 (1947) 28-35.
   doi:10.1093/biomet/34.1-2.28
.. [3] F. E. Satterthwaite, "An approximate distribution of estimates of
   variance components", Biometrics Bulletin 2 (1946) 110-114. doi:10.2307/3002019
.. [4] T. C. Hesterberg, "What teachers should know about the bootstrap:
   resampling in the undergraduate statistics curriculum", The American
   Statistician 69 (2015) 371-386. doi:10.1080/00031305.2015.1089789
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy import stats as sps

from analysis.compare.bootstrap import Difference, Pieces, Statistic, evaluate
from analysis.compare.course_kpis import RunData
from analysis.errors import CompareError

#: Units of the two kinds a comparison can rest on.
UNIT_KINDS = ("run", "lap")
#: Fewest units of each version for a comparison that rests on units. [-]
MIN_UNITS = 2


@dataclass
class ReplicateUnit:
    """One replicate of a version: a whole run, or one lap of a run.

    Attributes
    ----------
    run : RunData
        The run the unit belongs to.
    position : ndarray
        Course position of every frame sample of the run (reference-course
        distance); NaN for samples outside the unit. [m]
    label : str
        Shown to people: the run id, or ``"<run id> lap 3"``.
    kind : str
        ``"run"`` or ``"lap"``.
    """

    run: RunData
    position: np.ndarray
    label: str
    kind: str = "run"

    def __post_init__(self) -> None:
        if self.kind not in UNIT_KINDS:
            raise CompareError(f"Unknown replicate unit {self.kind!r}; use one of {UNIT_KINDS}.")
        n = len(self.run.frame)
        if np.shape(self.position) != (n,):
            raise CompareError(
                f"Unit {self.label}: {np.size(self.position)} positions for {n} samples; give "
                "one course position per frame sample (NaN outside the unit)."
            )


def unit_values(stat: Statistic, pieces: Pieces) -> np.ndarray:
    """The KPI of each unit alone, from its own blocks.

    Parameters
    ----------
    stat : Statistic
    pieces : Pieces
        Rows are units (``n_runs`` of them).

    Returns
    -------
    ndarray, shape (n_units,)
        KPI per unit; NaN where a unit has nothing in the blocks (e.g. a
        partial lap that does not reach a segment). [KPI unit]
    """
    idx = np.arange(pieces.n_blocks)[None, :]
    out = np.empty(pieces.n_runs)
    for u in range(pieces.n_runs):
        one = Pieces({k: v[u : u + 1] for k, v in pieces.data.items()}, 1, pieces.n_blocks)
        out[u] = evaluate(stat, one, idx)[0]
    return out


def welch_difference(values_a: np.ndarray, values_b: np.ndarray, level: float) -> Difference:
    """Difference of unit means, B - A, with Welch's interval and its p-value.

    Parameters
    ----------
    values_a, values_b : ndarray
        The KPI of each unit of A and of B; NaN units are left out. [KPI unit]
    level : float
        Confidence level of the interval. [-]

    Returns
    -------
    Difference
        ``a``, ``b`` the unit means; ``low``, ``high`` the interval; ``p`` the
        two-sided p-value of no difference; ``n_blocks`` the fewer units. NaN
        interval and p with fewer than :data:`MIN_UNITS` finite units on a side,
        or when neither version varies but their values differ.

    Notes
    -----
    ``d = mean(b) - mean(a)``, ``se^2 = s_a^2 / n_a + s_b^2 / n_b`` ([2]),
    degrees of freedom ``nu = se^4 / ((s_a^2/n_a)^2/(n_a-1) + (s_b^2/n_b)^2/(n_b-1))``
    ([3]), interval ``d -/+ t_(nu, 1-alpha/2) se`` and
    ``p = 2 P(T_nu > |d| / se)``. With ``s_b = 0`` this is Student's
    one-sample interval of A with ``n_a - 1`` degrees of freedom.
    """
    va = np.asarray(values_a, dtype=float)
    vb = np.asarray(values_b, dtype=float)
    va, vb = va[np.isfinite(va)], vb[np.isfinite(vb)]
    nan = float("nan")
    a = float(va.mean()) if va.size else nan
    b = float(vb.mean()) if vb.size else nan
    n = int(min(va.size, vb.size))
    d = b - a
    if n < MIN_UNITS:
        return Difference(a, b, d, nan, nan, n, p=nan)
    wa = float(va.var(ddof=1)) / va.size  # [2]
    wb = float(vb.var(ddof=1)) / vb.size
    se2 = wa + wb
    if se2 <= 0.0:
        # Neither version varies: equal values are no difference; unequal ones
        # have no spread to judge them by.
        if d == 0.0:
            return Difference(a, b, d, 0.0, 0.0, n, p=1.0)
        return Difference(a, b, d, nan, nan, n, p=nan)
    nu = se2 * se2 / (wa * wa / (va.size - 1) + wb * wb / (vb.size - 1))  # [3]
    se = math.sqrt(se2)
    half = float(sps.t.ppf(0.5 + 0.5 * level, nu)) * se
    p = float(2.0 * sps.t.sf(abs(d) / se, nu))
    return Difference(a, b, d, d - half, d + half, n, p=p)


def basis_text(n_a: int, n_b: int, kind: str = "run") -> str:
    """What a verdict rests on, in words: ``"3 runs per version"`` or the within-run warning.

    Parameters
    ----------
    n_a, n_b : int
        Units of each version. [-]
    kind : str
        ``"run"`` or ``"lap"``.
    """
    if min(n_a, n_b) >= MIN_UNITS:
        if n_a == n_b:
            return f"{n_a} {kind}s per version"
        return f"{n_a} {kind}s of A, {n_b} of B"
    if n_a == n_b == 1:
        return f"1 {kind} per version: within-{kind} spread only"
    few = "A" if n_a < MIN_UNITS else "B"
    return f"1 {kind} of {few}: within-{kind} spread only"
