"""Whole-run chart overview: a min/max-preserving reduction of every chart signal.

The Run page first draws the whole run. Reducing an hour of 400 Hz samples to
the page's point budget means reading and scanning every sample (about a
second for 34 signals), so each run keeps a small overview instead: the run's
time range (first to last sample) is cut into :data:`OVERVIEW_BUCKETS` equal buckets and each bucket
keeps the sample holding its minimum and the one holding its maximum (with
their times, in time order) for every signal. A single-sample spike or dip is
the extreme of its bucket, so it is kept exactly. Data gaps are kept as gaps:
one break point (a NaN value) in each hole of the time stamps and in each run
of NaN samples longer than a data gap, by the same rule the chart
downsampling applies to raw samples. A signal with at most ``2 * buckets``
valid samples is kept whole, so short runs draw exactly as from raw samples.

Why this module: the overview is built where analysis results are committed
(:func:`analysis.detect.pipeline.analyse_run`) and, for runs stored before it existed,
on first use by the server; ``analysis/`` never imports ``server/``, so the
reduction and the gap rule live here (numpy only, no files). The archive
module :mod:`analysis.archive.overview_store` stores and reads it, and
``server.downsample`` uses the same gap rule for raw windows. This is plumbing
for charts, not physics: it keeps samples as they are and computes nothing new.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from analysis import catalogue as cat
from analysis.errors import OutriggerError
from analysis.events import GAP_FACTOR

#: Sources of chart signals: the run's frame and the derived series of its analysis.
FRAME, DERIVED = "frame", "derived"
#: Time buckets of the whole-run overview (each keeps its min and its max sample). [-]
OVERVIEW_BUCKETS = 4096


@dataclass(frozen=True)
class SignalOverview:
    """One signal of the overview.

    Attributes
    ----------
    source : str
        :data:`FRAME` or :data:`DERIVED`.
    t : ndarray
        Times of the kept samples and break points, increasing. [s]
    y : ndarray
        Values of the kept samples; NaN at break points. [SI unit of the signal]
    samples : int
        Valid (non-NaN) samples of the whole run before reduction. [-]
    """

    source: str
    t: np.ndarray
    y: np.ndarray
    samples: int


@dataclass
class RunOverview:
    """The overview of one run.

    Attributes
    ----------
    buckets : int
        Time buckets used. [-]
    spans : dict of str to (float, float)
        First and last sample time of each source. [s]
    signals : dict of str to SignalOverview
        Every numeric signal of the frame and every derived series not in the frame.
    fingerprint : tuple
        What the run's stored files were when it was built (set by the archive).
    """

    buckets: int
    spans: dict[str, tuple[float, float]]
    signals: dict[str, SignalOverview] = field(default_factory=dict)
    fingerprint: tuple[tuple[object, ...], ...] = ()

    @property
    def nbytes(self) -> int:
        """Bytes of the arrays. [B]"""
        return sum(int(s.t.nbytes + s.y.nbytes) for s in self.signals.values())


def time_gaps(t: np.ndarray) -> tuple[np.ndarray, float]:
    """Positions of the data gaps of a time axis and its median step.

    Parameters
    ----------
    t : ndarray
        Sample times, increasing. [s]

    Returns
    -------
    gaps : ndarray of int
        Positions ``i`` where the step ``t[i] -> t[i+1]`` is longer than
        ``GAP_FACTOR`` median steps (common practice, no source; the rule of
        ``analysis.events``).
    median_dt : float
        Median step; NaN with fewer than 3 samples. [s]
    """
    if t.size < 3:
        return np.empty(0, dtype=np.int64), float("nan")
    dt = np.diff(t)
    median = float(np.median(dt))
    if not np.isfinite(median) or median <= 0:
        return np.empty(0, dtype=np.int64), median
    return np.flatnonzero(dt > GAP_FACTOR * median), median


def nan_run_breaks(t: np.ndarray, nan: np.ndarray, median_dt: float) -> np.ndarray:
    """Times at which to break the line inside interior NaN runs that span a data gap.

    Parameters
    ----------
    t : ndarray
        Sample times, increasing. [s]
    nan : ndarray of bool
        True where the value is missing. [-]
    median_dt : float
        Median sample step of the axis. [s]

    Returns
    -------
    ndarray
        Midpoint between the valid samples on either side of each interior NaN
        run longer than ``GAP_FACTOR * median_dt``; leading and trailing runs
        connect nothing and give none. [s]
    """
    if not nan.size:
        return np.empty(0)
    edges = np.diff(nan.astype(np.int8))
    starts = np.flatnonzero(edges == 1) + 1  # first NaN of a run
    ends = np.flatnonzero(edges == -1) + 1  # first valid sample after a run
    if nan[0]:
        ends = ends[1:]  # a leading run connects nothing
    starts = starts[: ends.size]  # a trailing run connects nothing
    if not starts.size or not np.isfinite(median_dt):
        return np.empty(0)
    before, after = t[starts - 1], t[ends]
    long = (after - before) > GAP_FACTOR * median_dt
    return np.asarray(0.5 * (before[long] + after[long]))


def _first_per_segment(positions: np.ndarray, segment: np.ndarray) -> np.ndarray:
    """The first of ``positions`` in each segment (``segment[positions]`` non-decreasing)."""
    if not positions.size:
        return positions
    seg = segment[positions]
    first = np.empty(positions.size, dtype=bool)
    first[0] = True
    np.not_equal(seg[1:], seg[:-1], out=first[1:])
    return positions[first]


def bucket_of(t: np.ndarray, buckets: int = OVERVIEW_BUCKETS) -> np.ndarray:
    """Bucket number of each sample: ``buckets`` equal time buckets over ``t[0] .. t[-1]``.

    Parameters
    ----------
    t : ndarray
        Sample times, increasing. [s]
    buckets : int
        Number of buckets. [-]

    Returns
    -------
    ndarray of int
        Non-decreasing, from 0 to ``buckets - 1`` (the last sample is in the last).
    """
    if not t.size:
        return np.empty(0, dtype=np.int64)
    span = float(t[-1] - t[0])
    scale = buckets / span if span > 0 else 0.0
    return np.minimum(((t - t[0]) * scale).astype(np.int64), buckets - 1)


def bucket_extremes(
    t: np.ndarray,
    y: np.ndarray,
    buckets: int = OVERVIEW_BUCKETS,
    bucket: np.ndarray | None = None,
) -> np.ndarray:
    """Indices of the samples holding each time bucket's minimum and maximum.

    Parameters
    ----------
    t : ndarray
        Sample times, increasing. [s]
    y : ndarray
        Values; NaN samples are never kept. [any]
    buckets : int
        Equal time buckets spanning ``t[0] .. t[-1]``. [-]
    bucket : ndarray of int, optional
        ``bucket_of(t, buckets)`` when already known (signals sharing one axis).

    Returns
    -------
    ndarray of int
        Sorted indices of the valid samples kept: in each non-empty bucket the
        first sample equal to its minimum and the first equal to its maximum
        (one index when they coincide). Every valid index when there are at
        most ``2 * buckets`` of them.
    """
    valid = ~np.isnan(y)
    n_valid = int(np.count_nonzero(valid))
    if n_valid <= 2 * buckets:
        return np.flatnonzero(valid)
    if bucket is None:
        bucket = bucket_of(t, buckets)
    idx: np.ndarray | None = None
    if n_valid == y.size:
        yv, seg = y, bucket
    else:
        idx = np.flatnonzero(valid)
        yv, seg = y[idx], bucket[idx]
    starts = np.flatnonzero(np.r_[True, seg[1:] != seg[:-1]])
    counts = np.diff(np.r_[starts, yv.size])
    # Each bucket's extremes spread back over its samples; the first equal sample wins.
    lo = np.repeat(np.minimum.reduceat(yv, starts), counts)
    hi = np.repeat(np.maximum.reduceat(yv, starts), counts)
    first_lo = _first_per_segment(np.flatnonzero(yv == lo), seg)
    first_hi = _first_per_segment(np.flatnonzero(yv == hi), seg)
    keep = np.union1d(first_lo, first_hi)
    return keep if idx is None else idx[keep]


def overview_signal(
    source: str,
    t: np.ndarray,
    y: np.ndarray,
    gaps: np.ndarray,
    median_dt: float,
    buckets: int = OVERVIEW_BUCKETS,
    bucket: np.ndarray | None = None,
) -> SignalOverview:
    """Reduce one signal of one source to its bucket extremes and break points.

    Parameters
    ----------
    source : str
        :data:`FRAME` or :data:`DERIVED`.
    t : ndarray
        Sample times of the whole run, increasing. [s]
    y : ndarray
        Values, float; NaN marks missing samples. [any]
    gaps : ndarray of int
        ``time_gaps(t)[0]``, shared by every signal of the source.
    median_dt : float
        ``time_gaps(t)[1]``. [s]
    buckets : int
        Time buckets. [-]
    bucket : ndarray of int, optional
        ``bucket_of(t, buckets)`` when already known.

    Returns
    -------
    SignalOverview
        Kept samples and one NaN point inside each gap of the stamps and each
        NaN run that spans a gap, sorted by time.
    """
    keep = bucket_extremes(t, y, buckets, bucket)
    nan = np.isnan(y)
    samples = int(y.size - np.count_nonzero(nan))
    breaks = 0.5 * (t[gaps] + t[gaps + 1])
    if samples < y.size:
        breaks = np.concatenate([breaks, nan_run_breaks(t, nan, median_dt)])
    t_out, y_out = t[keep], y[keep]
    if breaks.size:
        t_out = np.concatenate([t_out, breaks])
        y_out = np.concatenate([y_out, np.full(breaks.size, np.nan)])
        order = np.argsort(t_out, kind="stable")
        t_out, y_out = t_out[order], y_out[order]
    return SignalOverview(source, np.ascontiguousarray(t_out), np.ascontiguousarray(y_out), samples)


def _as_float(column: pd.Series) -> np.ndarray | None:
    """A column as float64 with NaN for missing values (bool as 0/1); None if not numeric."""
    try:
        return np.ascontiguousarray(column.to_numpy(dtype=np.float64, na_value=np.nan))
    except (TypeError, ValueError):
        return None


def build_overview(
    frame: pd.DataFrame,
    series: pd.DataFrame | None = None,
    buckets: int | None = None,
) -> RunOverview:
    """The whole-run overview of a run's frame and derived series.

    Parameters
    ----------
    frame : DataFrame
        The run's frame (column ``t`` and every stored column). [SI]
    series : DataFrame, optional
        Derived series of the last analysis (column ``t`` first); None when the
        run was never analysed. Columns also in ``frame`` are left out, as the
        chart endpoint serves those from the frame. [SI]
    buckets : int, optional
        Time buckets; :data:`OVERVIEW_BUCKETS` (read at call time) when None. [-]

    Returns
    -------
    RunOverview
        Every column that converts to float (numbers, bool as 0/1); text columns
        are left out (charts draw none).
    """
    buckets = int(OVERVIEW_BUCKETS if buckets is None else buckets)
    if buckets < 1:
        raise OutriggerError(f"An overview needs at least one time bucket, found {buckets}.")
    out = RunOverview(buckets=buckets, spans={})
    sources: Mapping[str, pd.DataFrame | None] = {FRAME: frame, DERIVED: series}
    for source, table in sources.items():
        if table is None or cat.T not in table:
            continue
        t = np.ascontiguousarray(table[cat.T].to_numpy(dtype=np.float64))
        if t.size:
            out.spans[source] = (float(t[0]), float(t[-1]))
        gaps, median_dt = time_gaps(t)
        bucket = bucket_of(t, buckets)
        for name in table.columns:
            if name == cat.T or name in out.signals:
                continue
            y = _as_float(table[name])
            if y is not None:
                out.signals[str(name)] = overview_signal(
                    source, t, y, gaps, median_dt, buckets, bucket
                )
    return out
