"""Events and the one event-extraction helper every detector uses.

An event is an interval of time where a condition held: it has a kind (see
``catalogue.EVENT_KINDS``), a channel (actuator or wheel name, or None for the
whole robot), start and end time, a peak value and free-form details.

Extraction uses a threshold with hysteresis (enter above ``on``, stay while
above ``off``), merges intervals of the same kind closer than a merge gap,
drops those shorter than a minimum duration, and never bridges a data gap.
The work is vectorised: loops run over intervals, never over samples.
"""

from __future__ import annotations

import json
from collections.abc import Iterator
from contextlib import contextmanager
from contextvars import ContextVar
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd

#: A data gap is a sample interval longer than this many median periods
#: (the same rule ingestion uses to report gaps; common practice, no source).
GAP_FACTOR = 5.0


@dataclass
class Event:
    """One detected interval.

    Attributes
    ----------
    kind : str
        Event kind, a key of ``catalogue.EVENT_KINDS``.
    channel : str or None
        Actuator or wheel name from the profile; None for whole-robot events.
    start_s, end_s : float
        First and last sample time of the interval. [s]
    peak : float
        Most extreme value of the detector's signal inside the interval, in the
        unit of that signal (given in ``detail["unit"]``).
    detail : dict
        JSON-serialisable details (signal, unit, direction, threshold, ...).
    """

    kind: str
    channel: str | None
    start_s: float
    end_s: float
    peak: float
    detail: dict[str, Any] = field(default_factory=dict)

    @property
    def duration_s(self) -> float:
        """End minus start. [s]"""
        return self.end_s - self.start_s

    def to_dict(self) -> dict[str, Any]:
        """JSON shape used by the CLI and the API."""
        return {
            "kind": self.kind,
            "channel": self.channel,
            "start_s": float(self.start_s),
            "end_s": float(self.end_s),
            "duration_s": float(self.duration_s),
            "peak": None if not np.isfinite(self.peak) else float(self.peak),
            "detail": self.detail,
        }


@dataclass
class DetectorResult:
    """What one detector returns.

    Attributes
    ----------
    detector : str
        Detector name (``saturation``, ``slip``, ``tip``, ``roll``, ``balance``).
    events : list of Event
    kpis : dict
        JSON-serialisable KPIs, nested by channel where per channel.
    series : DataFrame
        Column ``t`` (the analysis frame's time base) plus the derived series,
        named after ``catalogue`` (``wheel_l.slip_speed``, ``tip_margin``...).
    notes : list of str
        Remarks on how the result was obtained (e.g. a fallback used).
    skipped : str or None
        Why the detector could not run (names the missing signal and what would
        supply it); then events, kpis and series are empty.
    """

    detector: str
    events: list[Event] = field(default_factory=list)
    kpis: dict[str, Any] = field(default_factory=dict)
    series: pd.DataFrame = field(default_factory=pd.DataFrame)
    notes: list[str] = field(default_factory=list)
    skipped: str | None = None


#: The run's median sample interval while a part of the run is analysed on its own
#: (see :func:`run_median_period`); None outside such an analysis.
_RUN_MEDIAN_PERIOD: ContextVar[float | None] = ContextVar("run_median_period", default=None)


@contextmanager
def run_median_period(period_s: float) -> Iterator[None]:
    """Within the block, :func:`median_period` returns ``period_s`` for any time axis.

    An analysis in time chunks (:mod:`analysis.detect.chunked`) sets the median
    sample interval of the whole run here, so that every gap rule and filter
    sample rate in a chunk is the one a whole-run pass uses. [s]
    """
    token = _RUN_MEDIAN_PERIOD.set(float(period_s))
    try:
        yield
    finally:
        _RUN_MEDIAN_PERIOD.reset(token)


def median_period(t: np.ndarray) -> float:
    """Median sample interval of ``t`` (the run's, inside :func:`run_median_period`). [s]

    NaN for fewer than two samples.
    """
    fixed = _RUN_MEDIAN_PERIOD.get()
    if fixed is not None:
        return fixed
    t = np.asarray(t, dtype=float)
    if t.size < 2:
        return float("nan")
    return float(np.median(np.diff(t)))


def data_gaps(t: np.ndarray, factor: float = GAP_FACTOR) -> np.ndarray:
    """Mark sample intervals that are data gaps.

    Parameters
    ----------
    t : ndarray
        Sample times, increasing. [s]
    factor : float
        A gap is an interval longer than ``factor`` times the median interval. [-]

    Returns
    -------
    ndarray of bool, length ``len(t) - 1``
        True where the interval from ``t[i]`` to ``t[i+1]`` is a gap.
    """
    t = np.asarray(t, dtype=float)
    if t.size < 2:
        return np.zeros(0, dtype=bool)
    dt = np.diff(t)
    med = median_period(t)
    if not med > 0:
        return np.zeros(dt.size, dtype=bool)
    return dt > factor * med


def _runs(mask: np.ndarray, breaks: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Start and end indices (inclusive) of runs of True, cut where ``breaks`` is True.

    ``breaks[i]`` True means samples i and i+1 may not share a run.
    """
    m = mask.astype(np.int8)
    d = np.diff(np.concatenate(([0], m, [0])))
    starts = np.flatnonzero(d == 1)
    ends = np.flatnonzero(d == -1) - 1
    if breaks.size and starts.size:
        # A break inside a run splits it: sample i ends one run, i+1 starts the next.
        cut = np.flatnonzero(breaks & mask[:-1] & mask[1:])
        if cut.size:
            starts = np.sort(np.concatenate((starts, cut + 1)))
            ends = np.sort(np.concatenate((ends, cut)))
    return starts, ends


def find_intervals(
    t: np.ndarray,
    value: np.ndarray,
    on: float,
    off: float,
    *,
    min_duration_s: float,
    merge_gap_s: float,
    above: bool = True,
    gap_factor: float = GAP_FACTOR,
) -> list[tuple[int, int]]:
    """Find intervals where ``value`` crosses ``on`` and stays beyond ``off``.

    Parameters
    ----------
    t : ndarray
        Sample times, increasing. [s]
    value : ndarray
        The detector's signal; NaN samples count as inactive and as a break.
    on, off : float
        Entry and exit thresholds, in the unit of ``value``. With ``above`` an
        interval holds where ``value > off`` and contains a sample ``> on``
        (so ``off <= on``); otherwise ``value < off`` containing one ``< on``.
    min_duration_s : float
        Intervals (after merging) shorter than this are dropped. [s]
    merge_gap_s : float
        Intervals separated by at most this are merged, unless a data gap lies
        between them. [s]
    above : bool
        Direction of the condition.
    gap_factor : float
        See :func:`data_gaps`. [-]

    Returns
    -------
    list of (start_index, end_index)
        Inclusive sample indices of each interval.
    """
    t = np.asarray(t, dtype=float)
    v = np.asarray(value, dtype=float)
    if t.size == 0:
        return []
    with np.errstate(invalid="ignore"):
        hold = (v > off) if above else (v < off)
        trig = (v > on) if above else (v < on)
    nan = np.isnan(v)
    hold &= ~nan
    trig &= ~nan
    gaps = data_gaps(t, gap_factor)
    starts, ends = _runs(hold, gaps)
    if starts.size == 0:
        return []
    # Keep runs that contain at least one triggering sample.
    ctrig = np.concatenate(([0], np.cumsum(trig)))
    keep = (ctrig[ends + 1] - ctrig[starts]) > 0
    starts, ends = starts[keep], ends[keep]
    if starts.size == 0:
        return []
    # Merge neighbours closer than merge_gap_s, never across a data gap.
    cgap = np.concatenate(([0], np.cumsum(gaps)))
    between_gap = (cgap[starts[1:]] - cgap[ends[:-1]]) > 0
    close = (t[starts[1:]] - t[ends[:-1]]) <= merge_gap_s
    join = close & ~between_gap
    group = np.concatenate(([0], np.cumsum(~join)))
    first = np.flatnonzero(np.concatenate(([True], ~join)))
    last = np.concatenate((first[1:] - 1, [group.size - 1]))
    m_starts, m_ends = starts[first], ends[last]
    long_enough = (t[m_ends] - t[m_starts]) >= min_duration_s
    return [
        (int(a), int(b)) for a, b in zip(m_starts[long_enough], m_ends[long_enough], strict=True)
    ]


def intervals_to_events(
    t: np.ndarray,
    value: np.ndarray,
    intervals: list[tuple[int, int]],
    kind: str,
    channel: str | None,
    *,
    peak: str = "absmax",
    detail: dict[str, Any] | None = None,
) -> list[Event]:
    """Turn index intervals into events, with the peak of ``value`` in each.

    Parameters
    ----------
    peak : {"absmax", "max", "min"}
        Which extreme of ``value`` inside the interval is the event's peak; for
        ``absmax`` the signed value of largest magnitude.
    detail : dict
        Copied into every event's details.
    """
    t = np.asarray(t, dtype=float)
    v = np.asarray(value, dtype=float)
    events = []
    for a, b in intervals:
        seg = v[a : b + 1]
        if np.all(np.isnan(seg)):
            pk = float("nan")
        elif peak == "max":
            pk = float(np.nanmax(seg))
        elif peak == "min":
            pk = float(np.nanmin(seg))
        else:
            pk = float(seg[int(np.nanargmax(np.abs(seg)))])
        events.append(Event(kind, channel, float(t[a]), float(t[b]), pk, dict(detail or {})))
    return events


def mask_of_events(t: np.ndarray, events: list[Event]) -> np.ndarray:
    """Boolean mask of the samples of ``t`` that lie inside any of the events."""
    t = np.asarray(t, dtype=float)
    mask = np.zeros(t.size, dtype=bool)
    for e in events:
        a = int(np.searchsorted(t, e.start_s, side="left"))
        b = int(np.searchsorted(t, e.end_s, side="right"))
        mask[a:b] = True
    return mask


def events_frame(events: list[Event]) -> pd.DataFrame:
    """Events as a DataFrame (columns of :meth:`Event.to_dict`, detail as JSON text)."""
    rows = [e.to_dict() for e in events]
    for r in rows:
        r["detail"] = json.dumps(r["detail"], sort_keys=True)
    cols = ["kind", "channel", "start_s", "end_s", "duration_s", "peak", "detail"]
    return pd.DataFrame(rows, columns=cols)
