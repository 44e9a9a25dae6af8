"""Min/max-preserving downsampling of chart series, with data gaps kept as gaps.

The dashboard never sends every sample of a long run to the browser: each
series is reduced on the server to a point budget with MinMaxLTTB [1] from the
``tsdownsample`` package. MinMaxLTTB first keeps the minimum and maximum of
``minmax_ratio * n_out`` buckets, then runs Largest-Triangle-Three-Buckets on
them, so a single-sample spike (a saturation peak, a slip burst) survives.

Gaps stay gaps: where two consecutive samples lie further apart than
``GAP_FACTOR`` median sample periods -- the rule ingestion and the detectors use
for data gaps -- or a run of NaN samples spans that long, a null point is
inserted so that the chart breaks the line instead of drawing across missing
data.

This module is the one place in ``server/`` that does arithmetic on signals
(DESIGN.md allows it: it decides what to draw, it computes no physics).

References
----------
[1] J. Van Der Donckt, J. Van Der Donckt, M. Rademaker, S. Van Hoecke,
    "MinMaxLTTB: Leveraging MinMax-Preprocessing to Accelerate LTTB", 2023 IEEE
    Visualization and Visual Analytics (VIS), 2023. arXiv:2305.00332.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from tsdownsample import MinMaxLTTBDownsampler

from analysis.overview import nan_run_breaks, time_gaps

#: Smallest point budget the API accepts (LTTB needs first, last and one bucket).
MIN_POINTS = 10
#: Largest point budget the API accepts per signal.
MAX_POINTS = 20_000
#: MinMaxLTTB preselection ratio; 4 is the library default and the paper's choice.
MINMAX_RATIO = 4
#: Series at least this long are downsampled on all cores.
PARALLEL_FROM = 200_000

_DOWNSAMPLER = MinMaxLTTBDownsampler()


@dataclass(frozen=True)
class Reduced:
    """A series ready to draw.

    Attributes
    ----------
    t : ndarray
        Sample times, with one extra time inside each data gap. [s]
    y : ndarray
        Values, NaN at the inserted gap points (sent to the page as null).
    n_samples : int
        Valid (non-NaN) samples in the window before reduction.
    downsampled : bool
        True when the window held more valid samples than the budget.
    """

    t: np.ndarray
    y: np.ndarray
    n_samples: int
    downsampled: bool


@dataclass(frozen=True)
class TimeBase:
    """Data gaps of a time axis, found once and shared by every series on it.

    Attributes
    ----------
    gaps : ndarray of int
        Positions ``i`` where the step ``t[i] -> t[i+1]`` is a data gap.
    median_dt : float
        Median sample step; NaN when fewer than 3 samples. [s]
    """

    gaps: np.ndarray
    median_dt: float

    def window(self, i0: int, i1: int) -> TimeBase:
        """The gaps inside the slice ``t[i0:i1]`` of the same axis (positions relative to i0).

        The median step stays that of the whole axis: a short window is judged by
        the run's sample rate, not by its own few steps.
        """
        lo, hi = np.searchsorted(self.gaps, [i0, i1 - 1])  # a gap i needs t[i + 1] inside
        return TimeBase(self.gaps[lo:hi] - i0, self.median_dt)


def time_base(t: np.ndarray) -> TimeBase:
    """Find the data gaps of a time axis.

    Parameters
    ----------
    t : ndarray
        Sample times, increasing. [s]

    Returns
    -------
    TimeBase
        A step is a gap when longer than ``GAP_FACTOR`` times the median step
        (common practice, no source; the same rule as ``analysis.events``,
        applied by :func:`analysis.overview.time_gaps`).
    """
    gaps, median = time_gaps(t)
    return TimeBase(gaps, median)


def select_indices(t: np.ndarray, y: np.ndarray, n_out: int) -> np.ndarray:
    """Indices of the valid samples to keep, at most ``n_out`` of them.

    Parameters
    ----------
    t : ndarray
        Sample times, increasing. [s]
    y : ndarray
        Values; NaN samples are never selected. [any]
    n_out : int
        Point budget. [-]

    Returns
    -------
    ndarray of int
        Sorted indices into ``t``/``y``. All valid indices when they fit the budget.
    """
    nan = np.isnan(y)
    n_valid = y.size - int(np.count_nonzero(nan))
    if n_valid <= n_out:
        return np.flatnonzero(~nan)
    # MinMaxLTTB skips NaN values itself; only the forced first/last point may be NaN.
    picked = _DOWNSAMPLER.downsample(
        np.ascontiguousarray(t, dtype=np.float64),
        np.ascontiguousarray(y, dtype=np.float64),
        n_out=n_out,
        minmax_ratio=MINMAX_RATIO,
        parallel=y.size >= PARALLEL_FROM,
    )
    picked = np.sort(np.asarray(picked, dtype=np.int64))
    return picked[~nan[picked]]


def reduce_series(
    t: np.ndarray, y: np.ndarray, n_out: int, base: TimeBase | None = None
) -> Reduced:
    """Downsample one series to a point budget, keeping extremes and gaps.

    Parameters
    ----------
    t : ndarray
        Sample times of the window, increasing. [s]
    y : ndarray
        Values (bool is drawn as 0/1); NaN marks missing samples. [any]
    n_out : int
        Point budget, between :data:`MIN_POINTS` and :data:`MAX_POINTS`. [-]
    base : TimeBase, optional
        ``time_base(t)`` when already known (several series on one time axis).

    Returns
    -------
    Reduced
        Full resolution when the window holds no more valid samples than ``n_out``.
        A null point breaks the line in each gap of the time stamps and in each
        run of NaN samples that spans a gap.
    """
    t = np.asarray(t, dtype=np.float64)
    y = np.asarray(y, dtype=np.float64)
    base = base if base is not None else time_base(t)
    keep = select_indices(t, y, n_out)
    nan = np.isnan(y)
    n_valid = y.size - int(np.count_nonzero(nan))
    breaks = 0.5 * (t[base.gaps] + t[base.gaps + 1])
    if n_valid < y.size:
        breaks = np.concatenate([breaks, nan_run_breaks(t, nan, base.median_dt)])
    t_out = t[keep]
    y_out = y[keep]
    if breaks.size:
        t_out = np.concatenate([t_out, breaks])
        y_out = np.concatenate([y_out, np.full(breaks.size, np.nan)])
        order = np.argsort(t_out, kind="stable")
        t_out, y_out = t_out[order], y_out[order]
    return Reduced(t=t_out, y=y_out, n_samples=n_valid, downsampled=n_valid > n_out)


def reduce_overview(t: np.ndarray, y: np.ndarray, samples: int, n_out: int) -> Reduced:
    """Downsample one signal of a stored whole-run overview to a point budget.

    Parameters
    ----------
    t : ndarray
        Times of the overview's points, increasing. [s]
    y : ndarray
        Their values; NaN marks a break point (a data gap), kept as is. [any]
    samples : int
        Valid samples of the whole run the overview stands for. [-]
    n_out : int
        Point budget. [-]

    Returns
    -------
    Reduced
        MinMaxLTTB [1] over the overview's valid points (all of them when they
        fit the budget) and every break point, in time order. ``n_samples`` and
        ``downsampled`` refer to the whole run, as for :func:`reduce_series`.
    """
    nan = np.isnan(y)
    valid = np.flatnonzero(~nan)
    keep = valid[select_indices(t[valid], y[valid], n_out)]
    if valid.size < y.size:
        keep = np.union1d(keep, np.flatnonzero(nan))
    return Reduced(t=t[keep], y=y[keep], n_samples=int(samples), downsampled=samples > n_out)


def json_values(values: np.ndarray, digits: int = 6) -> list[float | None]:
    """Round to ``digits`` significant digits and turn NaN/inf into None for JSON.

    Parameters
    ----------
    values : ndarray
        Values to send. [any]
    digits : int
        Significant digits kept relative to the largest magnitude; charts
        cannot show more (a 1000-pixel axis resolves 3 to 4 digits). [-]
    """
    a = np.asarray(values, dtype=np.float64)
    finite = np.isfinite(a)
    if finite.any():
        scale = float(np.max(np.abs(a[finite])))
        decimals = digits - 1 - int(np.floor(np.log10(scale))) if scale > 0 else digits
        a = np.round(a, max(0, min(decimals, 15)))
    out: list[float | None] = a.tolist()
    if not finite.all():
        for i in np.flatnonzero(~finite):  # loop over the few gap points only
            out[int(i)] = None
    return out


def json_times(t: np.ndarray, decimals: int = 4) -> list[float]:
    """Round times to ``decimals`` places (0.1 ms: finer than any 1 kHz log step). [s]"""
    return np.round(np.asarray(t, dtype=np.float64), decimals).tolist()
