"""Overlay data of a comparison: signals of A and B runs against course position.

The charts of the compare page and of the HTML report draw roll error,
tip-over margin, torques and slip speed of every run against its position on
the reference course, with the segment boundaries and each run's events. To
keep the payload small each trace is reduced per distance bin to the samples
holding the bin's minimum and maximum, so peaks survive (common practice, no
source).
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any

import numpy as np
import pandas as pd

from analysis import catalogue as cat
from analysis.compare.align import course_distance
from analysis.compare.compare import Comparison
from analysis.compare.course_kpis import RunData

#: Distance bins per trace (each keeps up to two samples). [-]
OVERLAY_BINS = 1000


def minmax_by_bin(x: np.ndarray, y: np.ndarray, lo: float, hi: float, bins: int) -> np.ndarray:
    """Indices of the samples holding each bin's min and max of ``y``, sorted.

    Parameters
    ----------
    x : ndarray
        Position of each sample. [m]
    y : ndarray
        Value of each sample; NaN samples are left out. [any unit]
    lo, hi : float
        Range binned; samples outside are left out. [m]
    bins : int
        Number of equal bins. [-]

    Returns
    -------
    ndarray of int
    """
    ok = np.flatnonzero(np.isfinite(y) & (x >= lo) & (x <= hi))
    if ok.size == 0 or not hi > lo:
        return ok
    b = np.minimum(((x[ok] - lo) / (hi - lo) * bins).astype(int), bins - 1)
    df = pd.DataFrame({"b": b, "y": y[ok], "i": ok})
    g = df.groupby("b")["y"]
    keep = np.union1d(
        df["i"].to_numpy()[g.idxmin().to_numpy()], df["i"].to_numpy()[g.idxmax().to_numpy()]
    )
    return keep.astype(int)


def _signals(run: RunData) -> list[tuple[str, str, str, pd.DataFrame]]:
    """(name, label, unit, source frame) of each overlay signal the run has."""
    out = []
    if cat.ROLL_ERROR in run.series:
        out.append((cat.ROLL_ERROR, "Roll error", "rad", run.series))
    if cat.TIP_MARGIN in run.series:
        out.append((cat.TIP_MARGIN, "Tip-over margin", "-", run.series))
    for a in run.profile.actuators:
        for q in (cat.TORQUE, cat.TORQUE_CMD):
            name = cat.actuator_signal(a.name, q)
            if name in run.frame:
                out.append((name, f"Torque, {a.name}", "N*m", run.frame))
                break
    for w in sorted(x.name for x in run.profile.wheels().values()):
        name = f"{w}.{cat.SLIP_SPEED}"
        if name in run.series:
            out.append((name, f"Slip speed, {w}", "m/s", run.series))
    return out


def overlay(
    comparison: Comparison,
    runs_a: Sequence[RunData],
    runs_b: Sequence[RunData],
    bins: int = OVERLAY_BINS,
) -> dict[str, Any]:
    """Chart data of a comparison.

    Parameters
    ----------
    comparison : Comparison
        From :func:`analysis.compare.compare.compare_runs` on these runs.
    runs_a, runs_b : sequence of RunData
    bins : int
        Distance bins per trace. [-]

    Returns
    -------
    dict
        ``signals`` (name, label, unit), ``traces`` (run, version, name,
        ``x`` [m] and ``y`` per signal), ``events`` (run, version, kind,
        channel, start_m, end_m), ``segments`` and ``stretch_m``.
    """
    lo, hi = comparison.stretch
    signals: dict[str, dict[str, str]] = {}
    traces: list[dict[str, Any]] = []
    events: list[dict[str, Any]] = []
    for version, runs in (("A", runs_a), ("B", runs_b)):
        for run in runs:
            offset = comparison.offsets.get(run.run_id, 0.0) if comparison.same_course else 0.0
            t = run.frame[cat.T].to_numpy(dtype=float)
            pos = course_distance(run.frame, run.profile) + offset
            r_hi = hi if comparison.same_course else float(pos[-1])
            per: dict[str, dict[str, list[float]]] = {}
            for name, label, unit, src in _signals(run):
                signals.setdefault(name, {"name": name, "label": label, "unit": unit})
                st = src[cat.T].to_numpy(dtype=float)
                x = np.interp(st, t, pos)
                y = src[name].to_numpy(dtype=float)
                keep = minmax_by_bin(x, y, lo, r_hi, bins)
                per[name] = {"x": x[keep].round(3).tolist(), "y": y[keep].tolist()}
            traces.append(
                {
                    "run": run.run_id,
                    "version": version,
                    "name": str(run.meta.get("name", run.run_id)),
                    "signals": per,
                }
            )
            # every event's ends in one call (a call per event converts t and pos each time)
            ends = np.interp(
                np.array([[e.start_s, e.end_s] for e in run.events], dtype=float).reshape(-1),
                t,
                pos,
            ).reshape(-1, 2)
            for e, (s, f) in zip(run.events, ends.tolist(), strict=True):
                if f < lo or s > r_hi:
                    continue
                events.append(
                    {
                        "run": run.run_id,
                        "version": version,
                        "kind": e.kind,
                        "channel": e.channel,
                        "start_m": float(s),
                        "end_m": float(f),
                    }
                )
    return {
        "signals": list(signals.values()),
        "traces": traces,
        "events": events,
        "segments": [s.to_dict() for s in comparison.segments],
        "stretch_m": [float(lo), float(hi)],
    }
