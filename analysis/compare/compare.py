"""Compare two controller versions driven on the same course.

:func:`compare_runs` is the pure core: runs (frames, derived series, events,
profile) of version A and of version B in, a :class:`Comparison` out. Every run
is aligned on the first A run's course (:mod:`analysis.compare.align`), the course is
split into segments (:mod:`analysis.compare.segments`) and blocks, each KPI
(:mod:`analysis.compare.course_kpis`) is computed overall and per segment, and each
difference B - A gets an interval and a verdict (:mod:`analysis.compare.table`):
over runs as replicate units when each version has at least two, else from the
blocks of one run (within-run spread only), corrected for the many cells by the
false discovery rate. When the runs do not look like one course, the
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
from analysis.archive.courses import course_marks, course_start_line
from analysis.compare.align import Alignment, CourseTrace, align_traces, course_trace, forward_speed
from analysis.compare.bootstrap import LEVEL, N_BOOT, Pieces
from analysis.compare.course_kpis import RunData, kpi_definitions, tip_edges
from analysis.compare.lap_compare import (
    LapPlan,
    lap_report_table,
    lap_windows,
    pieces_by_lap,
    plan_laps,
)
from analysis.compare.replicates import ReplicateUnit
from analysis.compare.segments import BLOCK_M, MIN_BLOCKS_PER_SEGMENT, Segment, block_edges
from analysis.compare.segments import segment_course as _segment_course
from analysis.compare.segments import segments_from_marks as _segments_from_marks
from analysis.compare.table import SPEED_SHARE, KpiRow, compare_pieces, compare_units
from analysis.errors import CompareError
from analysis.events import Event
from analysis.metrics import lag_by_xcorr
from analysis.profile import RobotProfile

if TYPE_CHECKING:
    from analysis.archive.store import Archive

__all__ = [
    "Comparison",
    "KpiRow",
    "ReplicateUnit",
    "RunData",
    "compare_archived",
    "compare_runs",
    "run_data",
]


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
    laps: dict[str, Any] | None = None
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
            "laps": _json_safe(self.laps),
        }


def _json_safe(value: Any) -> Any:
    if isinstance(value, dict):
        return {str(k): _json_safe(v) for k, v in value.items()}
    if isinstance(value, list | tuple):
        return [_json_safe(v) for v in value]
    if isinstance(value, np.generic):
        value = value.item()
    if isinstance(value, float) and not math.isfinite(value):
        return None
    return value


def _describe(run: RunData) -> dict[str, Any]:
    return {
        "run": run.run_id,
        "name": run.meta.get("name", run.run_id),
        "course": run.meta.get("course"),
        "controller": run.meta.get("controller"),
    }


#: Below this peak correlation of roll with its reference a lag is not reported
#: (common practice, no source): the peak of two weakly related signals is noise.
MIN_LAG_CORRELATION = 0.5


def _lag(
    run: RunData, position: np.ndarray, lo: float, hi: float, rows: slice = slice(None)
) -> float:
    """Roll lag of one run over a course stretch, by cross-correlation.

    ``rows`` limits the search to a slice of samples (one lap). NaN where
    undefined: too few samples, the peak at the search bound, or a peak
    correlation below :data:`MIN_LAG_CORRELATION`.
    """
    sel = (position[rows] >= lo) & (position[rows] <= hi)
    if sel.sum() < 8:
        return float("nan")
    f = run.frame
    t = f[cat.T].to_numpy(dtype=float)[rows][sel]
    ref = f[cat.ROLL_REF].to_numpy(dtype=float)[rows][sel]
    roll = f[cat.ROLL].to_numpy(dtype=float)[rows][sel]
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
    laps: bool = True,
    lap_start_m: float | None = None,
    speed_share: float = SPEED_SHARE,
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
        Confidence level of the intervals; the false discovery rate of the
        calls is ``1 - level``. [-]
    laps : bool
        Compare multi-lap runs lap by lap (:mod:`analysis.compare.lap_compare`)
        when the reference run is at least two laps of a loop; ``marks_m`` are
        then distances from the start line along one lap.
    lap_start_m : float, optional
        Start line of the laps, from the reference run's start (stored for the
        course). [m]
    speed_share : float
        Largest relative difference of mean speed in a cell before its
        speed-dependent KPIs lose their verdict. [-]

    Returns
    -------
    Comparison

    Notes
    -----
    Each run is one replicate unit (:class:`analysis.compare.replicates.ReplicateUnit`);
    :func:`analysis.compare.table.compare_units` does the statistics. With one
    run of a version, intervals are percentile block-bootstrap intervals ([1]
    Eq. 13.5, blocks [1] Section 8.6), paired over course blocks when the runs
    share the course, and show the spread within a run only.
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
    plan = plan_laps(runs, traces, lap_start_m) if laps and len(names) <= 1 else None
    if plan is not None:
        refusal = None if plan.same_course else plan.reason
        alignments = [_lap_alignment(plan, i, traces) for i in range(1, len(runs))]
    same = refusal is None
    offsets = [0.0] + [al.offset_m for al in alignments]
    if same and plan is not None:
        # Course position 0 is the start line: every run's first complete lap starts there.
        offsets = [-ls.complete[0].start_m for ls in plan.lapsets]
    speeds = [forward_speed(r.frame, r.profile) for r in runs]
    positions = [tr.distance + off for tr, off in zip(traces, offsets, strict=True)]
    edges_of: list[np.ndarray]
    segments: list[Segment] = []
    # Where each run's roll lag is measured: (position offset, sample rows) per replicate.
    lag_windows: list[list[tuple[float, slice]]] = [[(0.0, slice(None))] for _ in runs]
    lap_pieces: list[dict[str, np.ndarray]] | None = None
    if same and plan is not None:
        lo, hi = 0.0, plan.course_m
        if marks_m is not None:
            segments = _segments_from_marks(marks_m, lo, hi, plan.grid, plan.curvature)
        else:
            segments = _segment_course(plan.grid, plan.curvature, start_m=lo, end_m=hi)
        edges, owner = block_edges(segments, block_m)
        edges_of = [edges] * len(runs)
        kdefs = kpi_definitions(runs, tip_edges(runs))
        lap_pieces, positions = [], []
        for r, ls, tr, v in zip(runs, plan.lapsets, traces, speeds, strict=True):
            pc, pos = pieces_by_lap(r, ls, tr.distance, v, edges, plan.course_m, kdefs)
            lap_pieces.append(pc)
            positions.append(pos)
        lag_windows = [
            lap_windows(ls, tr.distance, plan.course_m)
            for ls, tr in zip(plan.lapsets, traces, strict=True)
        ]
    elif same:
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
    n_a = len(runs_a)
    lap_mode = same and plan is not None
    if lap_pieces is None:
        units = [ReplicateUnit(r, pos, r.run_id) for r, pos in zip(runs, positions, strict=True)]

        def lag(unit: ReplicateUnit, a: float, b: float) -> float:
            return _lag(unit.run, unit.position, a, b if same else np.inf)

        table = compare_units(
            units[:n_a], units[n_a:], segments=segments, edges=edges_of, owner=owner,
            paired=same, stretch=(lo, hi), speeds=speeds, lag=lag, n_boot=n_boot, seed=seed,
            level=level, speed_share=speed_share,
        )  # fmt: skip
    else:
        # Lap mode: every lap of every run is a replicate unit on the course's blocks.
        def stack(part: list[dict[str, np.ndarray]]) -> Pieces:
            data = {k: np.concatenate([p[k] for p in part]) for k in part[0]}
            n_units = int(next(iter(data.values())).shape[0])
            return Pieces(data, n_units, int(edges_of[0].size - 1))

        def lag_values(side: slice, a: float, b: float) -> np.ndarray:
            return np.array([
                _lag(r, p, off + a, off + b, rows)
                for r, p, windows in zip(runs[side], positions[side], lag_windows[side], strict=True)
                for off, rows in windows
            ])  # fmt: skip

        side_a, side_b = slice(0, n_a), slice(n_a, None)
        table = compare_pieces(
            kdefs, stack(lap_pieces[:n_a]), stack(lap_pieces[n_a:]), kind="lap",
            segments=segments, owner=owner, paired=False, stretch=(lo, hi),
            lags=lambda v, a, b: lag_values(side_a if v == "A" else side_b, a, b),
            n_boot=n_boot, seed=seed, level=level, speed_share=speed_share,
        )  # fmt: skip
    notes = list(table.notes)
    if lap_mode:
        notes.append(
            "Laps are the replicates: each lap is aligned on its own on the reference lap and "
            "whole laps of each version are resampled (Hurlbert 1984: the lap, not a 5 m block, "
            "varies with the battery and the motors' temperature). Totals (time to complete, "
            "energy, slip events, falls) are per lap."
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
        kpis=table.kpis,
        segment_kpis=table.segment_kpis,
        notes=notes,
        not_run=[
            {"run": r.run_id, "detector": d, "reason": why}
            for r in runs
            for d, why in r.skipped.items()
        ],
        settings={
            **table.settings,
            "block_m": block_m,
            **({"resampling": "whole laps, each version's laps pooled"} if lap_mode else {}),
            "segments_from": "distance marks" if marks_m is not None else "curvature",
        },
        laps=lap_report_table(runs_a, runs_b, plan) if lap_mode and plan is not None else None,
    )


def _lap_alignment(plan: LapPlan, i: int, traces: Sequence[CourseTrace]) -> Alignment:
    """Alignment of run ``i`` in lap mode: its first complete lap on the reference lap."""
    ref_first = plan.lapsets[0].complete[0] if plan.lapsets[0].complete else None
    done = plan.lapsets[i].complete
    match = float(np.nanmedian([lap.match for lap in done])) if done else float("nan")
    offset = (ref_first.start_m if ref_first else 0.0) - (done[0].start_m if done else 0.0)
    return Alignment(
        offset, match, plan.same_course, plan.reason, traces[0].length_m, traces[i].length_m,
        0.0, plan.course_m,
    )  # fmt: skip


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


def _frame_columns(profile: RobotProfile) -> list[str]:
    """Frame signals a comparison reads (distance, course shape, roll lag, energy)."""
    cols = [cat.VEL_X, cat.YAW_RATE, cat.PITCH_RATE, cat.ROLL, cat.ROLL_REF]
    for a in profile.actuators:
        cols += [cat.actuator_signal(a.name, q) for q in (cat.TORQUE, cat.TORQUE_CMD, cat.VEL)]
    return cols


def _series_columns(profile: RobotProfile) -> list[str]:
    """Derived series a comparison reads."""
    cols = [cat.ROLL_ERROR, cat.TIP_MARGIN]
    cols += [f"{a.name}.{cat.SATURATED}" for a in profile.actuators]
    cols += [f"{w.name}.{cat.SLIP_SPEED}" for w in profile.wheels().values()]
    return cols


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
    profile = archive.load_profile(run_id)
    stored = archive.read_results(run_id)
    if stored is None:
        frame = archive.load_frame(run_id)
        result = analyse_frame(frame, profile)
        skipped = {s["detector"]: s["reason"] for s in result.skipped}
        return RunData(run_id, frame, result.series, result.events, profile, meta, skipped)
    # Only the columns the comparison and its charts read: a one-hour run holds many more.
    frame = archive.load_frame(run_id, columns=_frame_columns(profile))
    events_df, summary = stored
    series = archive.read_result_series(run_id, columns=_series_columns(profile))
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
        stored for the runs' course (``analysis.archive.courses``) are used, if any, and
        likewise its start line (``lap_start_m``).
    """
    runs_a = [run_data(archive, i) for i in ids_a]
    runs_b = [run_data(archive, i) for i in ids_b]
    courses = _course_names([*runs_a, *runs_b])
    if len(courses) == 1:
        course = courses.pop()
        if kwargs.get("marks_m") is None:
            kwargs["marks_m"] = course_marks(archive.root, course)
        kwargs.setdefault("lap_start_m", course_start_line(archive.root, course))
    return compare_runs(runs_a, runs_b, **kwargs), runs_a, runs_b
