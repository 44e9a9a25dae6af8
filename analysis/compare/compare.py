"""Compare two controller versions driven on the same course.

:func:`compare_runs` is the pure core: runs (frames, derived series, events,
profile) of version A and of version B in, a :class:`Comparison` out. Every run
is aligned on the first A run's course (:mod:`analysis.compare.align`), the course is
split into segments (:mod:`analysis.compare.segments`) and blocks, each KPI
(:mod:`analysis.compare.course_kpis`) is computed overall and per segment, and each
difference B - A gets a percentile block-bootstrap interval and a verdict
(:mod:`analysis.compare.bootstrap`). When the runs do not look like one course, the
per-segment comparison is refused with the reason, and the overall KPIs are
compared with each run cut into its own blocks, resampled independently.

:func:`compare_archived` loads stored runs and calls the core.

References
----------
.. [1] B. Efron and R. J. Tibshirani, An Introduction to the Bootstrap.
   Chapman & Hall/CRC, 1993. doi:10.1201/9780429246593
"""

from __future__ import annotations

import json
import math
from collections.abc import Sequence
from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any

import numpy as np
import pandas as pd

from analysis import catalogue as cat
from analysis.archive.courses import course_marks
from analysis.compare.align import Alignment, CourseTrace, align_traces, course_trace, forward_speed
from analysis.compare.bootstrap import (
    LEVEL,
    N_BOOT,
    Difference,
    Pieces,
    bootstrap_difference,
    bootstrap_runs,
    verdict,
)
from analysis.compare.course_kpis import (
    KpiDef,
    RunData,
    block_pieces,
    kpi_definitions,
    tip_edges,
)
from analysis.compare.segments import BLOCK_M, MIN_BLOCKS_PER_SEGMENT, Segment, block_edges
from analysis.compare.segments import segment_course as _segment_course
from analysis.compare.segments import segments_from_marks as _segments_from_marks
from analysis.errors import CompareError
from analysis.events import Event
from analysis.metrics import lag_by_xcorr

if TYPE_CHECKING:
    from analysis.archive.store import Archive

__all__ = ["Comparison", "KpiRow", "RunData", "compare_archived", "compare_runs", "run_data"]


@dataclass(frozen=True)
class KpiRow:
    """One KPI of the comparison: both values, the difference, its interval and verdict."""

    key: str
    metric: str
    channel: str | None
    label: str
    unit: str
    better: str
    a: float
    b: float
    diff: float
    diff_pct: float
    low: float
    high: float
    verdict: str
    n_blocks: int

    def to_dict(self) -> dict[str, Any]:
        """JSON shape (NaN becomes None)."""
        out: dict[str, Any] = {}
        for k, v in self.__dict__.items():
            out[k] = None if isinstance(v, float) and not math.isfinite(v) else v
        return out


@dataclass
class Comparison:
    """Result of :func:`compare_runs`.

    Attributes
    ----------
    runs_a, runs_b : list of dict
        ``run``, ``name``, ``course``, ``controller`` of each run.
    alignments : list of dict
        Each non-reference run's :class:`Alignment` on the reference (first A) run.
    same_course : bool
        Whether the per-segment comparison was done.
    refusal : str or None
        Plain reason the per-segment comparison was refused.
    offsets : dict
        Course offset of each run on the reference course (its distance plus this is
        its course position). [m]
    stretch : (float, float)
        Course stretch compared (reference distance). [m]
    segments : list of Segment
    kpis : list of KpiRow
        Overall.
    segment_kpis : dict
        Segment name -> list of KpiRow.
    notes : list of str
    not_run : list of dict
        ``{"run", "detector", "reason"}`` for each detector a run's analysis
        skipped; its KPIs are left out of the comparison, never shown as 0.
    settings : dict
        ``n_boot``, ``seed``, ``level``, ``block_m``, resampling scheme.
    """

    runs_a: list[dict[str, Any]]
    runs_b: list[dict[str, Any]]
    alignments: list[dict[str, Any]]
    same_course: bool
    refusal: str | None
    offsets: dict[str, float]
    stretch: tuple[float, float]
    segments: list[Segment]
    kpis: list[KpiRow]
    segment_kpis: dict[str, list[KpiRow]]
    notes: list[str] = field(default_factory=list)
    settings: dict[str, Any] = field(default_factory=dict)
    not_run: list[dict[str, str]] = field(default_factory=list)

    def kpi(self, key: str) -> KpiRow:
        """The overall row of one KPI key."""
        for row in self.kpis:
            if row.key == key:
                return row
        raise CompareError(
            f"No KPI {key!r} in this comparison; KPIs: {', '.join(r.key for r in self.kpis)}."
        )

    def to_dict(self) -> dict[str, Any]:
        """The JSON shape of ``outrigger compare --json`` and the API."""
        return {
            "runs_a": self.runs_a,
            "runs_b": self.runs_b,
            "alignments": self.alignments,
            "same_course": self.same_course,
            "refusal": self.refusal,
            "offsets": self.offsets,
            "stretch_m": list(self.stretch),
            "segments": [s.to_dict() for s in self.segments],
            "kpis": [r.to_dict() for r in self.kpis],
            "segment_kpis": {k: [r.to_dict() for r in v] for k, v in self.segment_kpis.items()},
            "notes": self.notes,
            "not_run": self.not_run,
            "settings": self.settings,
        }


def _describe(run: RunData) -> dict[str, Any]:
    return {
        "run": run.run_id,
        "name": run.meta.get("name", run.run_id),
        "course": run.meta.get("course"),
        "controller": run.meta.get("controller"),
    }


def _row(k: KpiDef, d: Difference) -> KpiRow:
    low, high = d.low, d.high
    pct = 100.0 * d.diff / abs(d.a) if np.isfinite(d.a) and d.a != 0 else float("nan")
    return KpiRow(
        key=k.key, metric=k.metric, channel=k.channel, label=k.label, unit=k.unit,
        better=k.better, a=d.a, b=d.b, diff=d.diff, diff_pct=pct, low=low, high=high,
        verdict=verdict(low, high, k.better), n_blocks=d.n_blocks,
    )  # fmt: skip


#: Below this peak correlation of roll with its reference a lag is not reported
#: (common practice, no source): the peak of two weakly related signals is noise.
MIN_LAG_CORRELATION = 0.5


def _lag(run: RunData, position: np.ndarray, lo: float, hi: float) -> float:
    """Roll lag of one run over a course stretch, by cross-correlation.

    NaN where undefined: too few samples, the peak at the search bound, or a peak
    correlation below :data:`MIN_LAG_CORRELATION`.
    """
    sel = (position >= lo) & (position <= hi)
    if sel.sum() < 8:
        return float("nan")
    f = run.frame
    t = f[cat.T].to_numpy(dtype=float)[sel]
    ref = f[cat.ROLL_REF].to_numpy(dtype=float)[sel]
    roll = f[cat.ROLL].to_numpy(dtype=float)[sel]
    est = lag_by_xcorr(t, ref, roll, run.profile.thresholds.roll_lag_max_s)
    if est.at_bound or not est.correlation >= MIN_LAG_CORRELATION:
        # On a straight the reference barely moves: the peak is noise, not a lag.
        return float("nan")
    # Compared as a magnitude: leading the reference is no better than lagging it.
    return abs(est.lag_s)


def _course_names(runs: Sequence[RunData]) -> set[str]:
    return {str(r.meta["course"]) for r in runs if r.meta.get("course")}


def compare_runs(
    runs_a: Sequence[RunData],
    runs_b: Sequence[RunData],
    *,
    marks_m: Sequence[float] | None = None,
    block_m: float = BLOCK_M,
    n_boot: int = N_BOOT,
    seed: int = 0,
    level: float = LEVEL,
) -> Comparison:
    """Compare the runs of version A with those of version B.

    Parameters
    ----------
    runs_a, runs_b : sequence of RunData
        At least one run each; the first A run is the course reference.
    marks_m : sequence of float, optional
        Segment boundaries on the reference run's distance; default: automatic
        segments from the curvature. [m]
    block_m : float
        Bootstrap block length. [m]
    n_boot : int
        Bootstrap replicates. [-]
    seed : int
        Seed of the numpy Generator (same seed, same intervals). [-]
    level : float
        Confidence level of the intervals. [-]

    Returns
    -------
    Comparison

    Notes
    -----
    Differences are B - A of the pooled KPI; intervals are percentile
    block-bootstrap intervals ([1] Eq. 13.5, blocks [1] Section 8.6), paired
    over course blocks when the runs share the course. A KPI is "better" or
    "worse" only when its whole interval lies on one side of zero.
    """
    if not runs_a or not runs_b:
        raise CompareError(
            f"A comparison needs at least one run of each version, found {len(runs_a)} A "
            f"and {len(runs_b)} B runs."
        )
    if seed < 0:
        raise CompareError(
            f"The bootstrap seed must be a whole number >= 0, found {seed}. "
            "Give 0 or a positive seed."
        )
    runs = list(runs_a) + list(runs_b)
    ids = [r.run_id for r in runs]
    traces: list[CourseTrace] = [course_trace(r.frame, r.profile) for r in runs]
    ref = traces[0]
    notes: list[str] = []
    alignments: list[Alignment] = [align_traces(ref, tr) for tr in traces[1:]]
    refusal = None
    names = _course_names(runs)
    if len(names) > 1:
        refusal = (
            f"The runs are stored for different courses ({', '.join(sorted(names))}). "
            f"Per-segment comparison is refused; only the overall KPIs are compared."
        )
    else:
        for rid, al in zip(ids[1:], alignments, strict=True):
            if not al.same_course:
                refusal = f"Run {rid} against run {ids[0]}: {al.reason}"
                break
    same = refusal is None
    offsets = [0.0] + [al.offset_m for al in alignments]
    speeds = [forward_speed(r.frame, r.profile) for r in runs]
    positions = [tr.distance + off for tr, off in zip(traces, offsets, strict=True)]
    edges_of: list[np.ndarray]
    segments: list[Segment] = []
    if same:
        lo = max(0.0, *offsets)
        hi = min(tr.length_m + off for tr, off in zip(traces, offsets, strict=True))
        if marks_m is not None:
            segments = _segments_from_marks(marks_m, lo, hi, ref.grid, ref.curvature)
        else:
            segments = _segment_course(ref.grid, ref.curvature, start_m=lo, end_m=hi)
        edges, owner = block_edges(segments, block_m)
        edges_of = [edges] * len(runs)
    else:
        lo, hi = 0.0, float(ref.length_m)
        n = max(
            MIN_BLOCKS_PER_SEGMENT, int(round(np.median([t.length_m for t in traces]) / block_m))
        )
        edges_of = [np.linspace(0.0, tr.length_m, n + 1) for tr in traces]
        positions = [tr.distance for tr in traces]
        owner = np.zeros(n, dtype=int)
    kdefs = kpi_definitions(runs, tip_edges(runs))
    pieces = [
        block_pieces(r, pos, v, e, kdefs)
        for r, pos, v, e in zip(runs, positions, speeds, edges_of, strict=True)
    ]
    n_a = len(runs_a)

    def stack(part: list[dict[str, np.ndarray]]) -> Pieces:
        data = {k: np.stack([p[k] for p in part]) for k in part[0]}
        return Pieces(data, len(part), int(edges_of[0].size - 1))

    pa, pb = stack(pieces[:n_a]), stack(pieces[n_a:])
    rng = np.random.default_rng(seed)
    rows: list[KpiRow] = []
    seg_rows: dict[str, list[KpiRow]] = {s.name: [] for s in segments} if same else {}
    for k in kdefs:
        if k.stat is None:  # roll lag: one number per run, resampled over runs
            lag_hi = hi if same else np.inf
            lag_a = [_lag(r, p, lo, lag_hi) for r, p in zip(runs_a, positions[:n_a], strict=True)]
            lag_b = [_lag(r, p, lo, lag_hi) for r, p in zip(runs_b, positions[n_a:], strict=True)]
            rows.append(_row(k, bootstrap_runs(np.array(lag_a), np.array(lag_b), rng=rng,
                                               n_boot=n_boot, level=level)))  # fmt: skip
        else:
            d = bootstrap_difference(k.stat, pa, pb, paired=same, rng=rng, n_boot=n_boot,
                                     level=level)  # fmt: skip
            rows.append(_row(k, d))
        for i, seg in enumerate(segments if same else []):
            if k.stat is None:
                la = [_lag(r, p, seg.start_m, seg.end_m)
                      for r, p in zip(runs_a, positions[:n_a], strict=True)]  # fmt: skip
                lb = [_lag(r, p, seg.start_m, seg.end_m)
                      for r, p in zip(runs_b, positions[n_a:], strict=True)]  # fmt: skip
                d = bootstrap_runs(np.array(la), np.array(lb), rng=rng, n_boot=n_boot, level=level)
            else:
                blocks = np.flatnonzero(owner == i)
                d = bootstrap_difference(k.stat, pa.subset(blocks), pb.subset(blocks),
                                         paired=True, rng=rng, n_boot=n_boot, level=level)  # fmt: skip
            seg_rows[seg.name].append(_row(k, d))
    if any(k.stat is None for k in kdefs) and min(len(runs_a), len(runs_b)) < 2:
        notes.append(
            "The roll lag is one number per run; its interval needs at least two runs of each "
            "version."
        )
    if any(k.stat is not None and k.stat.kind in ("max", "min") for k in kdefs):
        notes.append(
            "Intervals of extremes (peak slip speed, max roll error, minimum tip-over margin) are "
            "indicative only: the bootstrap reproduces the spread of a sample maximum or minimum "
            "poorly (Efron & Tibshirani 1993 show it failing for the maximum, from memory); "
            "read them with the per-segment values."
        )
    if not same:
        notes.append(
            "Runs are not on one course: overall KPIs cover each run's whole length and are "
            "resampled independently per version."
        )
    return Comparison(
        runs_a=[_describe(r) for r in runs_a],
        runs_b=[_describe(r) for r in runs_b],
        alignments=[
            {"run": rid, "reference": ids[0], **al.to_dict()}
            for rid, al in zip(ids[1:], alignments, strict=True)
        ],
        same_course=same,
        refusal=refusal,
        offsets={rid: float(off) for rid, off in zip(ids, offsets, strict=True)},
        stretch=(float(lo), float(hi)),
        segments=segments,
        kpis=rows,
        segment_kpis=seg_rows,
        notes=notes,
        not_run=[
            {"run": r.run_id, "detector": d, "reason": why}
            for r in runs
            for d, why in r.skipped.items()
        ],
        settings={
            "n_boot": n_boot,
            "seed": seed,
            "level": level,
            "block_m": block_m,
            "resampling": "paired course blocks, runs pooled" if same else "independent blocks",
            "segments_from": "distance marks" if marks_m is not None else "curvature",
        },
    )


def events_from_frame(df: pd.DataFrame) -> list[Event]:
    """Stored events table (detail as JSON text) -> list of Event."""
    out = []
    for row in df.to_dict(orient="records"):
        ch = row.get("channel")
        if ch is None or (isinstance(ch, float) and math.isnan(ch)):
            ch = None
        detail = row.get("detail")
        d = json.loads(detail) if isinstance(detail, str) and detail else {}
        peak = row.get("peak")
        out.append(
            Event(str(row["kind"]), ch, float(row["start_s"]), float(row["end_s"]),
                  float("nan") if peak is None else float(peak), d)
        )  # fmt: skip
    return out


def run_data(archive: Archive, run_id: str) -> RunData:
    """Load one stored run with its analysis (analysed in memory if never analysed).

    Parameters
    ----------
    archive : Archive
    run_id : str

    Returns
    -------
    RunData
    """
    from analysis.detect.pipeline import analyse_frame

    meta = dict(archive.get_meta(run_id))
    frame = archive.load_frame(run_id)
    profile = archive.load_profile(run_id)
    stored = archive.read_results(run_id)
    if stored is None:
        result = analyse_frame(frame, profile)
        skipped = {s["detector"]: s["reason"] for s in result.skipped}
        return RunData(run_id, frame, result.series, result.events, profile, meta, skipped)
    events_df, summary = stored
    series = archive.read_result_series(run_id)
    skipped = {s["detector"]: s["reason"] for s in summary.get("skipped", [])}
    return RunData(run_id, frame, series, events_from_frame(events_df), profile, meta, skipped)


def compare_archived(
    archive: Archive, ids_a: Sequence[str], ids_b: Sequence[str], **kwargs: Any
) -> tuple[Comparison, list[RunData], list[RunData]]:
    """Compare stored runs; returns the comparison and the loaded runs (for charts).

    Parameters
    ----------
    archive : Archive
    ids_a, ids_b : sequence of str
        Run ids of version A and version B.
    **kwargs
        Passed to :func:`compare_runs`. Without ``marks_m``, the distance marks
        stored for the runs' course (``analysis.archive.courses``) are used, if any.
    """
    runs_a = [run_data(archive, i) for i in ids_a]
    runs_b = [run_data(archive, i) for i in ids_b]
    courses = _course_names([*runs_a, *runs_b])
    if kwargs.get("marks_m") is None and len(courses) == 1:
        kwargs["marks_m"] = course_marks(archive.root, courses.pop())
    return compare_runs(runs_a, runs_b, **kwargs), runs_a, runs_b
