"""Lap-by-lap comparison of multi-lap runs on one closed loop.

An endurance run of many laps cannot be aligned on another with one start
offset: odometry drifts by metres over kilometres. Instead every lap of every
run is aligned on its own (:mod:`analysis.laps`): the reference run's first
complete lap is the course, its curvature the template, and each lap of every
run is found by matching that template, then stretched linearly onto the
reference lap's length so that a scale error of the odometry cancels within
the lap. The laps are the replicates of the bootstrap (the natural blocks of
a run, [1]): in the per-block pieces of :mod:`analysis.compare.course_kpis`
each lap takes the place of a run, so the paired course-block bootstrap draws
laps of each version for each drawn course block.

References
----------
.. [1] B. Efron and R. J. Tibshirani, An Introduction to the Bootstrap.
   Chapman & Hall/CRC, 1993. Section 8.6. doi:10.1201/9780429246593
.. [2] S. H. Hurlbert, "Pseudoreplication and the design of ecological field
   experiments", Ecological Monographs 54(2), 187-211, 1984. doi:10.2307/1942661
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, replace
from typing import Any

import numpy as np

from analysis import catalogue as cat
from analysis.compare.align import MAX_LENGTH_DIFF, MIN_CORRELATION, CourseTrace
from analysis.compare.course_kpis import KpiDef, RunData, block_pieces
from analysis.display import display_unit, scalar_to_display
from analysis.errors import CompareError
from analysis.lap_kpis import LAP_KPIS, display_laps, lap_report
from analysis.laps import LapSet, laps_from_trace

#: Fewest complete laps every run needs for a lap-by-lap comparison. [-]
#: (common practice, no source: with one lap there is nothing to resample)
MIN_LAPS = 2


@dataclass
class LapPlan:
    """Laps of every run of a comparison, matched on the reference run's first lap.

    Attributes
    ----------
    lapsets : list of LapSet
        One per run (A runs first), found with the reference template.
    course_m : float
        Length of the reference lap (the course). [m]
    curvature : ndarray
        Its curvature on a grid of ``grid_m``. [rad/m]
    grid_m : float
        Grid spacing. [m]
    same_course : bool
        Every run has at least :data:`MIN_LAPS` complete laps that match the
        reference lap and have its length.
    reason : str
        Plain sentence on the decision.
    """

    lapsets: list[LapSet]
    course_m: float
    curvature: np.ndarray
    grid_m: float
    same_course: bool
    reason: str

    @property
    def grid(self) -> np.ndarray:
        """Distance grid of the reference lap. [m]"""
        return self.grid_m * np.arange(self.curvature.size)


def plan_laps(
    runs: Sequence[RunData], traces: Sequence[CourseTrace], start_m: float | None = None
) -> LapPlan | None:
    """Find the laps of every run on the reference run's first complete lap.

    Parameters
    ----------
    runs : sequence of RunData
        All runs, the reference first.
    traces : sequence of CourseTrace
        Their curvature traces (same grid spacing).
    start_m : float, optional
        Start line stored for the course, from the reference run's start (a line
        off that run is ignored: the run's start is used). [m]

    Returns
    -------
    LapPlan or None
        None when the reference run is not at least :data:`MIN_LAPS` laps of a
        loop (then the runs are compared whole).
    """
    t0 = runs[0].frame[cat.T].to_numpy(dtype=float)
    ref = find_laps_on_trace(traces[0], t0, start_m)
    complete = ref.complete
    if len(complete) < MIN_LAPS:
        return None
    dx = ref.grid_m
    first = complete[0]
    g0 = int(round(first.start_m / dx))
    n = int(round(first.length_m / dx))
    template = traces[0].curvature[g0 : g0 + n].copy()
    lapsets = [
        laps_from_trace(tr, r.frame[cat.T].to_numpy(dtype=float), template=template)
        for r, tr in zip(runs, traces, strict=True)
    ]
    problems = []
    for r, ls in zip(runs, lapsets, strict=True):
        done = ls.complete
        if len(done) < MIN_LAPS:
            problems.append(f"run {r.run_id} has {len(done)} complete laps of the reference loop")
            continue
        match = float(np.nanmedian([lap.match for lap in done]))
        length = float(np.median([lap.length_m for lap in done]))
        if not match >= MIN_CORRELATION:
            problems.append(
                f"the laps of run {r.run_id} match the reference lap only {match:.2f} "
                f"(at least {MIN_CORRELATION:.2f} expected)"
            )
        if abs(length - first.length_m) / first.length_m > MAX_LENGTH_DIFF:
            problems.append(
                f"the laps of run {r.run_id} are {length:.1f} m long against {first.length_m:.1f} m"
            )
    if problems:
        reason = (
            "These runs are not laps of one loop: "
            + "; ".join(problems)
            + ". Per-segment comparison is refused; only the overall KPIs are compared."
        )
    else:
        counts = ", ".join(
            f"{r.run_id} {len(ls.complete)}" for r, ls in zip(runs, lapsets, strict=True)
        )
        reason = (
            f"Laps of one loop of {first.length_m:.1f} m: each lap aligned on its own on the "
            f"reference run's lap {first.number} (complete laps: {counts})."
        )
    return LapPlan(lapsets, first.length_m, template, dx, not problems, reason)


def find_laps_on_trace(trace: CourseTrace, t: np.ndarray, start_m: float | None) -> LapSet:
    """The reference run's laps from its start line, or from its start when the line is off it."""
    if start_m is not None:
        try:
            return laps_from_trace(trace, t, start_m=start_m)
        except CompareError:
            pass
    return laps_from_trace(trace, t)


def lap_positions(
    distance: np.ndarray, lapset: LapSet, course_m: float, pitch_m: float
) -> np.ndarray:
    """Position of each sample on the course, lap ``j`` shifted by ``j * pitch_m``.

    Parameters
    ----------
    distance : ndarray
        Run distance of each sample. [m]
    lapset : LapSet
        The run's laps (only complete laps are placed).
    course_m : float
        Reference lap length: each lap is stretched onto ``[0, course_m]``. [m]
    pitch_m : float
        Spacing of the laps' copies of the course, more than ``course_m``. [m]

    Returns
    -------
    ndarray
        ``j * pitch_m + (s - start_j) * course_m / length_j`` inside complete lap
        ``j`` (0-based among complete laps), -1 elsewhere. [m]
    """
    pos = np.full(distance.size, -1.0)
    for j, lap in enumerate(lapset.complete):
        lo = np.searchsorted(distance, lap.start_m, side="left")
        hi = np.searchsorted(distance, lap.end_m, side="right")
        scale = course_m / lap.length_m if lap.length_m > 0 else 1.0
        pos[lo:hi] = j * pitch_m + np.clip((distance[lo:hi] - lap.start_m) * scale, 0.0, course_m)
    return pos


def lap_pitch(course_m: float) -> float:
    """Spacing of the laps' copies of the course in :func:`lap_positions`. [m]"""
    return 2.0 * course_m + 1.0


def lap_windows(lapset: LapSet, distance: np.ndarray, course_m: float) -> list[tuple[float, slice]]:
    """For each complete lap: its position offset and the slice of its samples."""
    pitch = lap_pitch(course_m)
    out = []
    for j, lap in enumerate(lapset.complete):
        lo = int(np.searchsorted(distance, lap.start_m, side="left"))
        hi = int(np.searchsorted(distance, lap.end_m, side="right"))
        out.append((j * pitch, slice(lo, hi)))
    return out


def lap_edges(edges: np.ndarray, n_laps: int, pitch_m: float) -> np.ndarray:
    """The course block edges repeated for each lap copy (with one gap block between)."""
    return np.concatenate([edges + j * pitch_m for j in range(n_laps)])


def pieces_by_lap(
    run: RunData,
    lapset: LapSet,
    distance: np.ndarray,
    speed: np.ndarray,
    edges: np.ndarray,
    course_m: float,
    kpis: Sequence[KpiDef],
) -> tuple[dict[str, np.ndarray], np.ndarray]:
    """Per-block pieces of every complete lap of one run, shape ``(n_laps, n_blocks, ...)``.

    One pass of :func:`analysis.compare.course_kpis.block_pieces` over the run
    with the course blocks repeated once per lap; the gap block between two
    copies holds no sample and is dropped. Events outside the complete laps are
    left out. Returns the pieces and each sample's lap position.
    """
    done = lapset.complete
    nb = edges.size - 1
    pitch = lap_pitch(course_m)
    pos = lap_positions(distance, lapset, course_m, pitch)
    all_edges = lap_edges(edges, len(done), pitch)
    spans = [(lap.start_s, lap.end_s) for lap in done]
    events = [e for e in run.events if any(a <= e.start_s <= b for a, b in spans)]
    raw = block_pieces(replace(run, events=events), pos, speed, all_edges, kpis)
    out = {}
    for k, v in raw.items():
        full = np.concatenate([v, np.zeros((1,) + v.shape[1:])]) if v.shape[0] % (nb + 1) else v
        out[k] = full.reshape((len(done), nb + 1) + v.shape[1:])[:, :nb]
    return out, pos


def lap_report_table(
    runs_a: Sequence[RunData], runs_b: Sequence[RunData], plan: LapPlan
) -> dict[str, Any]:
    """Per-lap KPIs and drift of every run, and lap-by-lap means of A and B.

    Returns
    -------
    dict
        ``course_m``, ``runs`` (run id -> :func:`analysis.lap_kpis.lap_report`
        of its laps found on the reference lap) and ``by_lap``: for each lap
        number, each KPI's mean over the A runs and over the B runs that have
        that complete lap, and B - A. Values SI.
    """
    runs = list(runs_a) + list(runs_b)
    reports = {
        r.run_id: lap_report(r.frame, r.series, r.events, r.profile, ls, list(r.skipped))
        for r, ls in zip(runs, plan.lapsets, strict=True)
    }
    ids_a = {r.run_id for r in runs_a}

    def complete_rows(rid: str) -> list[dict[str, Any]]:
        return [row for row in reports[rid]["kpis"] if not row["partial"]]

    by_lap: list[dict[str, Any]] = []
    n_max = max(len(complete_rows(r.run_id)) for r in runs)
    for i in range(n_max):
        entry: dict[str, Any] = {"lap": i + 1, "kpis": {}}
        for k in LAP_KPIS:
            vals: dict[str, list[float]] = {"a": [], "b": []}
            for r in runs:
                rows = complete_rows(r.run_id)
                if i < len(rows) and rows[i].get(k.key) is not None:
                    vals["a" if r.run_id in ids_a else "b"].append(float(rows[i][k.key]))
            a = float(np.mean(vals["a"])) if vals["a"] else None
            b = float(np.mean(vals["b"])) if vals["b"] else None
            entry["kpis"][k.key] = {
                "a": a,
                "b": b,
                "diff": None if a is None or b is None else b - a,
            }
        by_lap.append(entry)
    return {"course_m": round(plan.course_m, 3), "runs": reports, "by_lap": by_lap}


def display_lap_table(laps: dict[str, Any] | None) -> dict[str, Any] | None:
    """The lap-by-lap part of a comparison in the units shown to people (rad -> deg).

    Returns
    -------
    dict or None
        ``course_m``, ``kpi_defs`` (shown units), ``by_lap`` with ``a``, ``b`` and
        ``diff`` converted, and ``runs`` (each run's report through
        :func:`analysis.lap_kpis.display_laps`).
    """
    if not laps:
        return None
    si = {k.key: k.unit for k in LAP_KPIS}
    by_lap = []
    for entry in laps.get("by_lap", []):
        kpis = {}
        for key, cell in entry["kpis"].items():
            kpis[key] = {
                side: scalar_to_display(cell[side], si.get(key, ""))[0]
                for side in ("a", "b", "diff")
            }
        by_lap.append({"lap": entry["lap"], "kpis": kpis})
    return {
        "course_m": laps.get("course_m"),
        "kpi_defs": [
            {"key": k.key, "label": k.label, "unit": display_unit(k.unit)[0], "better": k.better}
            for k in LAP_KPIS
        ],
        "by_lap": by_lap,
        "runs": {rid: display_laps(rep) for rid, rep in laps.get("runs", {}).items()},
    }
