"""Analysis of a long run in time chunks, with results identical to one whole-run pass.

A whole-run pass holds the run's frame and every derived series at once: about
1.6 GiB per hour of 400 Hz logs. Here the run is read and analysed one time
chunk at a time (:data:`CHUNK_S` of core plus a margin either side), every
detector runs unchanged on each chunk, and the results are stitched:

* **Series.** Each chunk keeps the derived series of its core only; the margin
  is there so that every filter and window has settled at the core's edges.
  The margin (:func:`chunk_margin_s`) is the longest of: 40 time constants of
  the slowest pole of the zero-phase low-pass (a Butterworth filter of order n
  and cut-off f_c has its slowest pole at ``2 pi f_c sin(pi / (2 n))`` rad/s,
  e.g. scipy.signal.buttap; after 40 time constants a start-up transient has
  decayed by ``exp(-40) = 4e-18``, below the 2.2e-16 resolution of a double),
  the RMS torque window, and the "ended tilted" window of the balance
  detector; plus the merge gap and the minimum event duration.
* **Gaps and sample rate.** Every gap rule and filter sample rate uses the
  whole run's median sample interval (:func:`analysis.events.run_median_period`),
  not the chunk's.
* **Events.** A chunk ends at a *quiet* time: no event of any detector in the
  chunk lies within the merge gap of it, and it is at least one margin before
  the end of the chunk's window. Events starting in a core are taken from that
  chunk. If a chunk has no quiet time (one long event), the chunk grows. An
  event that would cross a cut in a whole-run pass would have been seen by the
  chunk on one side of it, unless it is a chain of above-threshold stretches
  longer than the margin whose every triggering sample lies beyond both chunks'
  settled parts; the next chunk checks that it too is quiet at the cut, and a
  disagreement makes the analysis fall back to one whole-run pass.
* **KPIs** are rebuilt from sums over the cores (:mod:`analysis.detect.chunk_kpis`);
  the roll lag (a cross-correlation over the whole run) from sums over chunks of
  roll and its reference (:mod:`analysis.detect.chunk_lag`); the 1st percentile of
  the tip margin keeps the margin's logged values (8 bytes per sample).
* **Overview.** The chart overview's per-bucket extremes and break points are
  gathered chunk by chunk (:class:`analysis.overview_builder.OverviewBuilder`), the same as
  :func:`analysis.overview.build_overview` on the whole run.

Where a chunk's detectors disagree with the first chunk on what could run (a
signal missing for a whole chunk, another fallback method), the chunked pass
cannot be the whole-run pass, so the run is analysed whole instead and a note
says so.
"""

from __future__ import annotations

import math
import re
from collections.abc import Callable
from concurrent.futures import Future, ThreadPoolExecutor
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd

from analysis import catalogue as cat
from analysis.detect.chunk_kpis import KNOWN, ChunkKpis
from analysis.detect.chunk_lag import lag_in_chunks
from analysis.detect.roll import roll_lag_elsewhere
from analysis.detect.tipover import F_Z_MIN
from analysis.events import Event, run_median_period
from analysis.metrics import FILTER_ORDER
from analysis.overview import RunOverview
from analysis.overview_builder import OverviewBuilder
from analysis.profile import RobotProfile, Thresholds

#: Core length of one chunk: 5 minutes of 400 Hz logs is about 0.1 GB of frame and
#: derived series, and a few times that for the detectors' intermediate arrays; the
#: margin either side (about 11 s with the demo profile) adds some 8 % of reading. [s]
CHUNK_S = 300.0
#: Time constants of the slowest filter pole in the margin (exp(-40) = 4e-18). [-]
SETTLE_TIME_CONSTANTS = 40.0

#: Loads the run's frame between two times (inclusive). [s]
FrameLoader = Callable[[float, float], pd.DataFrame]
#: Receives each chunk core's derived series, in time order.
SeriesSink = Callable[[pd.DataFrame], None]


class NotChunkableError(Exception):
    """The chunks disagree on what can run; analyse the run whole. Says why."""


def filter_settle_s(cutoff_hz: float, order: int = FILTER_ORDER) -> float:
    """Time after which a start-up transient of the low-pass is below double resolution.

    Parameters
    ----------
    cutoff_hz : float
        Cut-off of the Butterworth low-pass; 0 means no filter. [Hz]
    order : int
        Order of each pass. [-]

    Returns
    -------
    float
        ``SETTLE_TIME_CONSTANTS / (2 pi f_c sin(pi / (2 n)))``: the slowest pole
        of an order-n Butterworth filter has real part ``-2 pi f_c sin(pi/(2n))``
        (poles evenly spaced on a half circle; scipy.signal.buttap). [s]
    """
    if cutoff_hz <= 0:
        return 0.0
    slowest = 2.0 * math.pi * cutoff_hz * math.sin(math.pi / (2 * order))
    return SETTLE_TIME_CONSTANTS / slowest


def chunk_margin_s(th: Thresholds) -> float:
    """Margin read on each side of a chunk's core. [s]

    The longest reach of any filter or window (low-pass settling, the RMS torque
    window, the balance detector's end window), plus the merge gap and the
    minimum duration of an event, plus one second of slack for sample jitter.
    """
    reach = max(filter_settle_s(th.accel_cutoff), th.thermal_window_s, th.fall_end_window_s)
    return reach + th.merge_gap_s + th.min_duration_s + 1.0


def _quiet_time(
    events: list[Event], lower: float, upper: float, guard: float, step: float
) -> float | None:
    """Latest time in [lower, upper] farther than ``guard`` from every event, or None.

    ``step`` (half a sample interval) moves a cut just before a guarded span. [s]
    """
    spans = sorted((e.start_s - guard, e.end_s + guard) for e in events)
    union: list[list[float]] = []
    for a, b in spans:  # loop over events
        if union and a <= union[-1][1]:
            union[-1][1] = max(union[-1][1], b)
        else:
            union.append([a, b])
    cut = upper
    for a, b in reversed(union):
        if cut > b:
            break
        if cut >= a:
            cut = a - step
    return cut if cut >= lower else None


# --- the chunked pass -----------------------------------------------------------------


@dataclass
class ChunkedAnalysis:
    """What :func:`analyse_in_chunks` produced (series went to the sink)."""

    events: list[Event]
    kpis: dict[str, Any]
    skipped: list[dict[str, str]]
    notes: dict[str, list[str]]
    overview: RunOverview
    chunks: int
    series_columns: list[str]
    windows: list[tuple[float, float, float]] = field(default_factory=list)
    """(first, last time read, cut) of each chunk. [s]"""
    kept: pd.DataFrame | None = None
    """The whole run's ``t`` and kept frame columns (``keep`` of :func:`analyse_in_chunks`)."""
    median_dt: float = float("nan")
    """The run's median sample interval. [s]"""
    kept_series: pd.DataFrame | None = None
    """The whole run's ``t`` and kept derived series (``keep_series``), as float64."""
    alongside: Any = None
    """What ``alongside`` of :func:`analyse_in_chunks` returned."""


_COUNT_NOTE = re.compile(r"^\d+ sample\(s\) with vertical specific force below")
_STRETCH_NOTE = re.compile(r"\(order \d+ each way, cut-off [^,]+, \d+ gap-free stretch\(es\)\)")
_LAG_NOTE = ("Roll lag not estimated", "The roll lag peaks at the search bound")


def analyse_in_chunks(
    load: FrameLoader,
    t_all: np.ndarray,
    profile: RobotProfile,
    th: Thresholds,
    analyse: Callable[[pd.DataFrame], Any],
    sink: SeriesSink,
    *,
    load_columns: Callable[[list[str], float, float], pd.DataFrame],
    chunk_s: float = CHUNK_S,
    progress: Callable[[float, str], None] | None = None,
    keep: list[str] | None = None,
    keep_series: list[str] | None = None,
    alongside: Callable[[ChunkedAnalysis], Any] | None = None,
) -> ChunkedAnalysis:
    """Analyse a run chunk by chunk; see the module docstring.

    Parameters
    ----------
    load : callable
        ``load(t0, t1)``: the run's frame between two times, inclusive. [s]
    t_all : ndarray
        The run's time axis (the frame's ``t``). [s]
    profile : RobotProfile
    th : Thresholds
    analyse : callable
        ``analyse(frame)`` -> an ``AnalysisResult`` (every detector on a frame).
    sink : callable
        Receives each core's derived series (column ``t`` first), in time order.
    load_columns : callable
        ``load_columns(names, t0, t1)``: column ``t`` and those columns between two
        times, inclusive (for the roll lag, :mod:`analysis.detect.chunk_lag`). [s]
    chunk_s : float
        Core length of a chunk. [s]
    keep : list of str, optional
        Frame columns to keep for the whole run as the chunks pass (float64, 8 bytes a
        sample each; names the frame lacks are left out). They are returned in
        ``kept``, and the roll lag reads roll and its reference from them when kept,
        instead of reading the archive again.
    keep_series : list of str, optional
        The same for derived series (float64: a flag becomes 0/1); in ``kept_series``.
    alongside : callable, optional
        Called with the result (events, KPIs, kept columns) on a thread while the roll
        lag is found; what it returns goes to ``alongside`` of the result. It must not
        change the result.

    Raises
    ------
    NotChunkableError
        When chunks disagree on which detectors or methods could run.
    """
    t_first, t_last = float(t_all[0]), float(t_all[-1])
    # np.median(np.diff(t)) as in analysis.events.median_period, without a third copy
    median_dt = (
        float(np.median(np.diff(t_all), overwrite_input=True)) if t_all.size > 1 else float("nan")
    )
    margin = chunk_margin_s(th)
    guard = th.merge_gap_s + 2.0 * (median_dt if np.isfinite(median_dt) else 0.0)
    overview = OverviewBuilder(t_first, t_last, median_dt)
    events: list[Event] = []
    kpis_acc: ChunkKpis | None = None
    first_sig: tuple[Any, ...] | None = None
    notes: dict[str, list[str]] = {}
    skipped: list[dict[str, str]] = []
    columns: list[str] = []
    core_lo = t_first
    prev_cut_seen: float | None = None
    chunks = 0
    windows: list[tuple[float, float, float]] = []
    spans: dict[str, tuple[float, float]] = {}  # first and last logged time of ref and roll
    grow = 1.0
    kept_f = None if keep is None else _Kept(keep, t_all.size)
    kept_s = None if keep_series is None else _Kept(keep_series, t_all.size)
    pos = 0
    pending: Future[None] | None = None

    def tail(
        core_frame: pd.DataFrame,
        core_series: pd.DataFrame,
        events_now: list[Event],
        closing: bool,
        own: int,
        at: int,
        first: bool,
    ) -> None:
        """A chunk's KPI sums, kept columns and overview (on a thread, in chunk order)."""
        with run_median_period(median_dt):  # the gap rule of a whole-run pass
            kpis_acc.add(core_frame, core_series, events_now, closing)  # type: ignore[union-attr]
        own_frame, own_series = core_frame.iloc[:own], core_series.iloc[:own]
        for name in (cat.ROLL_REF, cat.ROLL):
            if name in own_frame:
                ok = own_frame[name].notna().to_numpy()
                if ok.any():
                    tt = own_frame[cat.T].to_numpy(dtype=float)[ok]
                    lo_v, hi_v = spans.get(name, (float(tt[0]), float(tt[-1])))
                    spans[name] = (min(lo_v, float(tt[0])), max(hi_v, float(tt[-1])))
        if kept_f is not None:
            kept_f.add(own_frame, at)
        if kept_s is not None:
            kept_s.add(own_series, at)
        overview.add(own_frame, "frame")
        if first:
            overview.freeze_frame_names()
        overview.add(own_series, "derived")

    # Each chunk's KPI sums, kept columns and overview run on a thread while the next
    # chunk is read and analysed (numpy lets go of the GIL in its loops).
    tails = ThreadPoolExecutor(max_workers=1, thread_name_prefix="chunk-tail")
    try:
        while True:
            nominal = core_lo + chunk_s * grow
            last = nominal + 2.0 * margin >= t_last
            lo, hi = core_lo - margin, (t_last if last else nominal + margin)
            frame = load(lo, hi)
            with run_median_period(median_dt), roll_lag_elsewhere():  # lag: over the run below
                res = analyse(frame)
            if last:
                cut = math.inf
            else:
                found = _quiet_time(
                    res.events, core_lo + 0.5 * chunk_s, hi - margin, guard, 0.5 * median_dt
                )
                if found is None:
                    grow += 1.0
                    continue
                cut = found
            if prev_cut_seen is not None and any(
                e.start_s - guard <= prev_cut_seen <= e.end_s + guard for e in res.events
            ):
                raise NotChunkableError(
                    f"an event crosses the chunk boundary at t = {prev_cut_seen:.2f} s in one chunk "
                    f"but not in the other"
                )
            sig = (
                tuple(sorted((s["detector"], s["reason"]) for s in res.skipped)),
                tuple(res.series.columns),
                tuple(
                    (name, k.get("method") if isinstance(k, dict) else None)
                    for name, k in sorted(res.kpis.items())
                ),
            )
            if first_sig is None:
                first_sig, skipped, columns = sig, list(res.skipped), list(res.series.columns)
                unknown = set(res.kpis) - KNOWN
                if unknown:
                    raise NotChunkableError(
                        f"no chunked KPIs for detector(s) {', '.join(sorted(unknown))}"
                    )
                kpis_acc = ChunkKpis(profile, th, t_first, res.kpis, samples=int(t_all.size))
            elif sig[:2] != first_sig[:2] or _methods(res.kpis) != _methods(kpis_acc.first_kpis):  # type: ignore[union-attr]
                raise NotChunkableError(
                    f"the chunk from t = {core_lo:.1f} s ran other detectors or methods than the first"
                )
            for name, lines in res.notes.items():
                have = notes.setdefault(name, [])
                have.extend(n for n in lines if n not in have)
            t = frame[cat.T].to_numpy(dtype=float)
            a = int(np.searchsorted(t, core_lo, side="left"))
            b = int(np.searchsorted(t, cut, side="left")) if not last else t.size
            mine = [e for e in res.events if core_lo <= e.start_s < cut]
            events.extend(mine)
            closing = (not last) and b < t.size
            stop = b + 1 if closing else b
            core_frame = frame.iloc[a:stop].reset_index(drop=True)
            core_series = res.series.iloc[a:stop].reset_index(drop=True)
            own = b - a
            if pending is not None:
                pending.result()  # one chunk's tail in flight at most; its error surfaces here
            sink(core_series.iloc[:own])
            pending = tails.submit(
                tail, core_frame, core_series, list(events), closing, own, pos, chunks == 0
            )
            pos += own
            chunks += 1
            windows.append((lo, hi, cut))
            if progress:
                progress(
                    min(1.0, (min(cut, t_last) - t_first) / max(t_last - t_first, 1e-9)), "chunk"
                )
            del frame, res, core_frame, core_series
            if last:
                break
            prev_cut_seen, core_lo, grow = cut, cut, 1.0
        if pending is not None:
            pending.result()
        assert kpis_acc is not None
        if (kept_f is not None or kept_s is not None) and pos != t_all.size:
            raise AssertionError(f"the chunks' cores hold {pos} samples, the run {t_all.size}")
        kept_frame = None if kept_f is None else kept_f.frame()
        kept_series = None if kept_s is None else kept_s.frame()
        events.sort(key=lambda e: (e.start_s, e.kind, e.channel or ""))
        kpis = kpis_acc.finish(events)
        _whole_run_notes(notes, kpis_acc, kpis, th)
        out = ChunkedAnalysis(
            events,
            kpis,
            skipped,
            notes,
            overview.finish(),
            chunks,
            [str(c) for c in columns],
            windows,
            kept_frame,
            median_dt,
            kept_series,
        )
        # `alongside` reads events, skipped detectors and kept columns, which the roll
        # lag below leaves alone; it writes only its own result
        later = tails.submit(alongside, out) if alongside is not None else None
        if "roll" in kpis and kpis["roll"].get("rms") is not None:

            def read(t0: float, t1: float) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
                if kept_frame is not None and {cat.ROLL_REF, cat.ROLL} <= set(kept_frame):
                    tk = kept_frame[cat.T].to_numpy()
                    i0, i1 = np.searchsorted(tk, t0, "left"), np.searchsorted(tk, t1, "right")
                    cols = kept_frame.iloc[i0:i1]
                else:
                    cols = load_columns([cat.ROLL_REF, cat.ROLL], t0, t1)
                return tuple(cols[n].to_numpy(dtype=float) for n in (cat.T, cat.ROLL_REF, cat.ROLL))  # type: ignore[return-value]

            nan = (float("nan"), float("nan"))
            span = (*spans.get(cat.ROLL_REF, nan), *spans.get(cat.ROLL, nan))
            lag = lag_in_chunks(read, t_all, lambda: span, th.roll_lag_max_s, chunk_s, median_dt)
            _roll_lag(notes, kpis["roll"], lag, th)
        if later is not None:
            out.alongside = later.result()
        return out
    finally:
        tails.shutdown(wait=True)  # also on an error: no thread left running


class _Kept:
    """Columns of a whole run gathered chunk by chunk: ``t`` and the wanted names that
    the first chunk holds, as float64 (NaN for missing, a flag as 0/1)."""

    def __init__(self, wanted: list[str], samples: int):
        self.wanted, self.samples = wanted, samples
        self.names: list[str] = []
        self.values: np.ndarray | None = None  # one row per column: (columns x samples)

    def add(self, table: pd.DataFrame, at: int) -> None:
        """The rows of ``table`` are the run's samples from position ``at`` on."""
        if self.values is None:
            self.names = [
                cat.T,
                *(c for c in dict.fromkeys(self.wanted) if c in table and c != cat.T),
            ]
            self.values = np.empty((len(self.names), self.samples))
        for j, name in enumerate(self.names):
            self.values[j, at : at + len(table)] = table[name].to_numpy(
                dtype=np.float64, na_value=np.nan
            )

    def frame(self) -> pd.DataFrame | None:
        """The columns as one frame (one block of the array, no copy)."""
        if self.values is None:
            return None
        return pd.DataFrame(self.values.T, columns=self.names, copy=False)


def _methods(kpis: dict[str, Any]) -> tuple[Any, ...]:
    """The method each detector (and actuator) used, to compare chunks."""
    out: list[tuple[Any, ...]] = []
    for name, k in sorted(kpis.items()):
        if not isinstance(k, dict):
            continue
        out.append((name, k.get("method")))
        out.extend((name, ch, v.get("method")) for ch, v in k.items() if isinstance(v, dict))
    return tuple(out)


def _whole_run_notes(
    notes: dict[str, list[str]], acc: ChunkKpis, kpis: dict[str, Any], th: Thresholds
) -> None:
    """Notes whose counts a chunk cannot give."""
    if "tip" in notes:
        lines = [n for n in notes["tip"] if not _COUNT_NOTE.match(n)]
        if acc.unsupported_samples:
            lines.append(
                f"{acc.unsupported_samples} sample(s) with vertical specific force below "
                f"{F_Z_MIN:.2f} m/s² (near free fall, no wheel loaded): the ZMP is undefined "
                f"there and the margin is reported as 0."
            )
        notes["tip"] = lines
    for name in ("tip", "roll"):
        if name in notes:
            seen_filter = False
            kept = []
            for n in notes[name]:
                if _STRETCH_NOTE.search(n):
                    if seen_filter:
                        continue
                    seen_filter = True
                kept.append(n)
            notes[name] = kept


def _roll_lag(notes: dict[str, list[str]], roll: dict[str, Any], lag: Any, th: Thresholds) -> None:
    """Put the whole run's roll lag in the roll KPIs and notes, as the detector words it."""
    lines = [n for n in notes.get("roll", []) if not n.startswith(_LAG_NOTE)]
    if lag.reason:
        lines.append(f"Roll lag not estimated: {lag.reason}.")
    elif lag.at_bound:
        lines.append(
            f"The roll lag peaks at the search bound ({th.roll_lag_max_s:g} s): the true lag may "
            f"be larger; raise roll_lag_max_s to search further."
        )
    notes["roll"] = lines
    roll["lag_s"] = None if not np.isfinite(lag.lag_s) else lag.lag_s
    roll["lag_correlation"] = None if not np.isfinite(lag.correlation) else lag.correlation
    roll["lag_at_bound"] = lag.at_bound
    roll["event_count"] = roll.pop("event_count")  # the detector's key order
