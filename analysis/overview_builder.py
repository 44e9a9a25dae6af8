"""The whole-run chart overview of a run fed in time order, in bounded memory.

:class:`OverviewBuilder` gives what :func:`analysis.overview.build_overview` gives on
the whole run (per-bucket extremes, gap and NaN-run breaks) from consecutive pieces
of the frame and the derived series: the chunked analysis
(:mod:`analysis.detect.chunked`) feeds it chunk by chunk, and the archive builds the
overview of a stored run without one a window at a time
(:func:`analysis.archive.overview_store.build_overview_in_windows`). Checked against
``build_overview`` in ``tests/analysis/detect/test_overview_builder.py``.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import overload

import numpy as np
import pandas as pd

from analysis import catalogue as cat
from analysis.events import GAP_FACTOR
from analysis.overview import OVERVIEW_BUCKETS, RunOverview, SignalOverview, _as_float


@dataclass
class _SignalAcc:
    """Kept samples and break points of one signal so far."""

    source: str
    t: list[np.ndarray] = field(default_factory=list)
    y: list[np.ndarray] = field(default_factory=list)
    bucket: list[np.ndarray] = field(default_factory=list)
    all_t: list[np.ndarray] = field(default_factory=list)
    all_y: list[np.ndarray] = field(default_factory=list)
    breaks: list[np.ndarray] = field(default_factory=list)
    samples: int = 0
    seen: int = 0
    any_nan: bool = False
    last_valid_t: float = float("nan")
    last_valid_i: int = -1


class OverviewBuilder:
    """:func:`analysis.overview.build_overview` of a whole run, fed in time order.

    Parameters
    ----------
    t_first, t_last : float
        First and last sample time of the run. [s]
    median_dt : float
        The run's median sample interval. [s]
    buckets : int, optional
        Time buckets; :data:`analysis.overview.OVERVIEW_BUCKETS` when None. [-]
    """

    def __init__(self, t_first: float, t_last: float, median_dt: float, buckets: int | None = None):
        self.buckets = int(OVERVIEW_BUCKETS if buckets is None else buckets)
        self.t_first, self.t_last, self.median_dt = t_first, t_last, median_dt
        span = t_last - t_first
        self.scale = self.buckets / span if span > 0 else 0.0
        self.signals: dict[str, _SignalAcc] = {}
        self.gap_breaks: list[np.ndarray] = []
        self.prev_t = float("nan")
        self.rows = 0

    def _bucket(self, t: np.ndarray) -> np.ndarray:
        return np.minimum(((t - self.t_first) * self.scale).astype(np.int64), self.buckets - 1)

    def add(self, table: pd.DataFrame, source: str) -> None:
        """Add the next rows of a source (column ``t`` first); frame rows before series."""
        t = np.ascontiguousarray(table[cat.T].to_numpy(dtype=np.float64))
        if not t.size:
            return
        if source == "frame":
            # time gaps: including the step from the previous chunk's last sample
            tt = t if np.isnan(self.prev_t) else np.concatenate(([self.prev_t], t))
            if self.rows + t.size >= 3 and np.isfinite(self.median_dt) and self.median_dt > 0:
                dt = np.diff(tt)
                g = np.flatnonzero(dt > GAP_FACTOR * self.median_dt)
                self.gap_breaks.append(0.5 * (tt[g] + tt[g + 1]))
        bucket = self._bucket(t)
        whole = _BucketRuns(bucket)  # shared by the signals without NaN in these rows
        for name in table.columns:
            if name == cat.T:
                continue
            acc = self.signals.get(str(name))
            if acc is None:
                if self._frozen and (source == "frame" or self._series_rows):
                    continue  # signals are those of the first chunk, as in one pass
                if source == "derived" and str(name) in self._frame_names:
                    continue
                y = _as_float(table[name])
                if y is None:
                    continue
                acc = self.signals[str(name)] = _SignalAcc(source)
                acc.seen = self.rows if source == "frame" else self._series_rows
            elif acc.source != source:
                continue
            else:
                y = _as_float(table[name])
                if y is None:
                    continue
            self._add_signal(acc, t, y, bucket, whole)
        if source == "frame":
            self.prev_t = float(t[-1])
            self.rows += t.size
        else:
            self._series_rows += t.size

    _frame_names: frozenset[str] = frozenset()
    _series_rows: int = 0
    _frozen: bool = False

    def freeze_frame_names(self) -> None:
        """Called once the frame's columns are known (derived columns in it are left out)."""
        self._frame_names = frozenset(n for n, a in self.signals.items() if a.source == "frame")
        self._frozen = True

    def _add_signal(
        self,
        acc: _SignalAcc,
        t: np.ndarray,
        y: np.ndarray,
        bucket: np.ndarray,
        whole: _BucketRuns,
    ) -> None:
        nan = np.isnan(y)
        if not nan.any():
            self._add_whole_signal(acc, t, y, bucket, whole)
            return
        acc.any_nan = True
        valid = ~nan
        n_valid = int(np.count_nonzero(valid))
        acc.samples += n_valid
        # Interior NaN runs (as overview.nan_run_breaks): between consecutive valid samples
        # with at least one NaN between them, break if the span is longer than a gap.
        edge = np.flatnonzero(valid[1:] != valid[:-1]) + 1
        after = edge[valid[edge]]  # first valid row after each NaN run
        before = edge[nan[edge]] - 1  # last valid row before each NaN run
        prev_t = t[before]
        if nan[0]:  # a NaN run from the first row: after the previous chunk's last valid
            prev_t = np.concatenate(([acc.last_valid_t], prev_t))
            if acc.last_valid_i < 0:  # no valid sample yet: not an interior run
                prev_t, after = prev_t[1:], after[1:]
        elif 0 <= acc.last_valid_i < acc.seen - 1:  # the previous chunk ended in NaN
            prev_t = np.concatenate(([acc.last_valid_t], prev_t))
            after = np.concatenate(([0], after))
        after_t, prev_t = t[after], prev_t[: after.size]
        long = (after_t - prev_t) > GAP_FACTOR * self.median_dt
        if long.any():
            acc.breaks.append(0.5 * (prev_t[long] + after_t[long]))
        if n_valid:
            last = y.size - 1 if valid[-1] else int(before[-1])
            acc.last_valid_i = acc.seen + last
            acc.last_valid_t = float(t[last])
        acc.seen += t.size
        if acc.samples <= 2 * self.buckets:
            acc.all_t.append(t[valid])
            acc.all_y.append(y[valid])
        elif acc.all_t:
            acc.all_t, acc.all_y = [], []
        if n_valid:
            at = whole.first_extremes(y, nan)
            if at is None:  # the valid rows on their own
                tv, yv, bv = t[valid], y[valid], bucket[valid]
                keep = _first_extremes(yv, bv)
                acc.t.append(tv[keep])
                acc.y.append(yv[keep])
                acc.bucket.append(bv[keep])
            else:
                acc.t.append(t[at])
                acc.y.append(y[at])
                acc.bucket.append(bucket[at])

    def _add_whole_signal(
        self,
        acc: _SignalAcc,
        t: np.ndarray,
        y: np.ndarray,
        bucket: np.ndarray,
        whole: _BucketRuns,
    ) -> None:
        """:meth:`_add_signal` of rows without NaN (most chunks): no index lists needed."""
        acc.samples += int(y.size)
        # a NaN run can only end at the first row: the previous chunk ended in NaN
        ended_nan = 0 <= acc.last_valid_i < acc.seen - 1
        if ended_nan and float(t[0]) - acc.last_valid_t > GAP_FACTOR * self.median_dt:
            acc.breaks.append(np.array([0.5 * (acc.last_valid_t + float(t[0]))]))
        acc.last_valid_i = acc.seen + int(y.size) - 1
        acc.last_valid_t = float(t[-1])
        acc.seen += t.size
        if acc.samples <= 2 * self.buckets:
            acc.all_t.append(t.copy())  # copies: a view would hold the chunk's frame
            acc.all_y.append(y.copy())
        elif acc.all_t:
            acc.all_t, acc.all_y = [], []
        keep = whole.first_extremes(y)
        acc.t.append(t[keep])
        acc.y.append(y[keep])
        acc.bucket.append(bucket[keep])

    def finish(self) -> RunOverview:
        """The overview, as :func:`analysis.overview.build_overview` gives it."""
        out = RunOverview(buckets=self.buckets, spans={})
        if self.rows:
            out.spans["frame"] = (self.t_first, self.t_last)
            if any(a.source == "derived" for a in self.signals.values()) or self._series_rows:
                out.spans["derived"] = (self.t_first, self.t_last)
        gaps = np.concatenate(self.gap_breaks) if self.gap_breaks else np.empty(0)
        for name, acc in self.signals.items():
            if acc.samples <= 2 * self.buckets:
                tk = np.concatenate(acc.all_t) if acc.all_t else np.empty(0)
                yk = np.concatenate(acc.all_y) if acc.all_y else np.empty(0)
            else:
                tc, yc, bc = (np.concatenate(x) for x in (acc.t, acc.y, acc.bucket))
                keep = _first_extremes(yc, bc)
                tk, yk = tc[keep], yc[keep]
            breaks = gaps
            if acc.any_nan and acc.breaks:
                breaks = np.concatenate([gaps, *acc.breaks])
            if breaks.size:
                tk = np.concatenate([tk, breaks])
                yk = np.concatenate([yk, np.full(breaks.size, np.nan)])
                order = np.argsort(tk, kind="stable")
                tk, yk = tk[order], yk[order]
            out.signals[name] = SignalOverview(
                acc.source, np.ascontiguousarray(tk), np.ascontiguousarray(yk), acc.samples
            )
        return out


class _BucketRuns:
    """The runs of equal buckets of some rows, laid out as a rectangle for argmin/argmax.

    Row k of :attr:`grid` holds the positions of bucket run k, its last position
    repeated to the longest run's length; a repeat is never the *first* extreme, so
    ``argmin`` / ``argmax`` along a row (first occurrence) give the first extremes.
    """

    def __init__(self, bucket: np.ndarray):
        self.bucket = bucket
        self.grid: np.ndarray | None = None
        if not bucket.size:
            return
        starts = np.flatnonzero(np.r_[True, bucket[1:] != bucket[:-1]])
        counts = np.diff(np.r_[starts, bucket.size])
        longest = int(counts.max())
        if starts.size * longest <= 2 * bucket.size:  # else uneven runs: the rectangle is big
            self.grid = np.minimum(
                starts[:, None] + np.arange(longest)[None, :], (starts + counts - 1)[:, None]
            )

    @overload
    def first_extremes(self, y: np.ndarray) -> np.ndarray: ...
    @overload
    def first_extremes(self, y: np.ndarray, nan: np.ndarray) -> np.ndarray | None: ...

    def first_extremes(self, y: np.ndarray, nan: np.ndarray | None = None) -> np.ndarray | None:
        """As :func:`_first_extremes` of ``y`` and these buckets, NaN rows left out.

        ``nan``: where ``y`` is NaN, when it has NaN; then None where the rectangle
        cannot be used (uneven runs). NaN stands in as +inf for the minimum and -inf
        for the maximum. It can tie with a logged infinity only where the bucket's
        logged values are all +inf (or all -inf): its first minimum is then its first
        maximum, which the other side finds.
        """
        if self.grid is None:
            return _first_extremes(y, self.bucket) if nan is None else None
        values = y[self.grid]
        if nan is None:
            lows, highs = values, values
        else:
            gap = nan[self.grid]
            lows, highs = np.where(gap, np.inf, values), np.where(gap, -np.inf, values)
        rows = np.arange(self.grid.shape[0])
        lo = self.grid[rows, lows.argmin(axis=1)]
        hi = self.grid[rows, highs.argmax(axis=1)]
        # the runs are in order: each run's two positions, earlier first, are sorted
        pairs = np.column_stack((np.minimum(lo, hi), np.maximum(lo, hi))).ravel()
        keep = np.ones(pairs.size, dtype=bool)
        keep[1::2] = lo != hi  # one position when the first minimum is the first maximum
        if nan is not None:
            keep &= ~nan[pairs]  # a bucket of NaN only gives a NaN row: no extreme
        return pairs[keep]


def _first_extremes(y: np.ndarray, bucket: np.ndarray) -> np.ndarray:
    """Sorted positions of the first minimum and first maximum of each bucket (no NaN)."""
    if not y.size:
        return np.empty(0, dtype=np.int64)
    starts = np.flatnonzero(np.r_[True, bucket[1:] != bucket[:-1]])
    counts = np.diff(np.r_[starts, y.size])
    lo = np.repeat(np.minimum.reduceat(y, starts), counts)
    hi = np.repeat(np.maximum.reduceat(y, starts), counts)

    def first(pos: np.ndarray) -> np.ndarray:
        if not pos.size:
            return pos
        seg = bucket[pos]
        keep = np.empty(pos.size, dtype=bool)
        keep[0] = True
        np.not_equal(seg[1:], seg[:-1], out=keep[1:])
        return pos[keep]

    keep = np.zeros(y.size, dtype=bool)  # the union of two sorted index sets, in order
    keep[first(np.flatnonzero(y == lo))] = True
    keep[first(np.flatnonzero(y == hi))] = True
    return np.flatnonzero(keep)
