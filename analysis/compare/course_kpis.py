"""The KPIs compared between controller versions, and their per-block pieces.

Every KPI is declared once here: its key, label, unit, which direction is
better, and how it combines per-block pieces (:class:`analysis.compare.bootstrap.Statistic`).
:func:`block_pieces` cuts one run into the course blocks (by its position on
the course) and sums, maxes or histograms each piece per block; all of it is
vectorised with ``bincount`` / ``ufunc.at`` over samples.

Integrals use the sample durations of :func:`analysis.metrics.sample_durations`
(half of each usable neighbouring interval, never across a data gap or a NaN),
so that the sum over all blocks of ``|e| dt`` is the trapezoid IAE of
:func:`analysis.metrics.iae` and the RMS matches :func:`analysis.metrics.rms`.

References
----------
.. [1] R. C. Dorf and R. H. Bishop, Modern Control Systems, 13th ed. Pearson,
   2017. Section 5.9 (IAE).
.. [2] D. Halliday, R. Resnick and J. Walker, Fundamentals of Physics, 10th ed.
   Wiley, 2013. Eq. 10-55 (rotational power P = tau * omega).
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd

from analysis import catalogue as cat
from analysis.compare.bootstrap import Statistic
from analysis.events import Event
from analysis.metrics import sample_durations
from analysis.profile import RobotProfile

LOWER = "lower"
HIGHER = "higher"

#: Every KPI metric this module can compare (per channel where noted), for gate files.
METRICS = (
    "saturation_share",  # per actuator
    "slip_events",  # per wheel
    "peak_slip_speed",  # per wheel
    "min_tip_margin",
    "tip_margin_p1",
    "roll_error_rms",
    "roll_error_max",
    "roll_error_iae",
    "roll_lag",
    "mean_speed",
    "time_to_complete",
    "falls",
    "energy",  # per actuator
)

#: Histogram bins of the tip-over margin quantile (linear inside each bin).
TIP_BINS = 400


@dataclass
class RunData:
    """One run with what its comparison needs.

    Attributes
    ----------
    run_id : str
        Archive id (or any label).
    frame : DataFrame
        Column ``t`` [s] plus canonical SI signals.
    series : DataFrame
        Column ``t`` [s] plus derived series of the analysis (``roll_error``,
        ``tip_margin``, ``<actuator>.saturated``, ``<wheel>.slip_speed``...).
    events : list of Event
        The analysis events.
    profile : RobotProfile
        The robot the run was driven with.
    meta : dict
        Run metadata (``name``, ``course``, ``controller``, ...).
    skipped : dict
        Detectors the analysis skipped: name -> reason. Their KPIs are left out
        of a comparison ("not run"), never counted as 0.
    """

    run_id: str
    frame: pd.DataFrame
    series: pd.DataFrame
    events: list[Event]
    profile: RobotProfile
    meta: dict[str, Any] = field(default_factory=dict)
    skipped: dict[str, str] = field(default_factory=dict)


@dataclass(frozen=True)
class KpiDef:
    """One compared KPI.

    Attributes
    ----------
    key : str
        ``<metric>`` or ``<channel>.<metric>``; also the gate file's key prefix.
    metric : str
        KPI name without channel.
    channel : str or None
        Actuator or wheel name.
    label : str
        Human label.
    unit : str
        Unit of the value (SI; ``count`` for event counts, ``-`` for ratios).
    better : str
        ``lower`` or ``higher``.
    stat : Statistic or None
        How pieces combine; None for one-number-per-run KPIs (roll lag).
    """

    key: str
    metric: str
    channel: str | None
    label: str
    unit: str
    better: str
    stat: Statistic | None


def _col(df: pd.DataFrame, name: str) -> np.ndarray | None:
    if name not in df.columns:
        return None
    x = df[name].to_numpy(dtype=float)
    return x if np.isfinite(x).any() else None


def _torque_name(frame: pd.DataFrame, actuator: str) -> str | None:
    for q in (cat.TORQUE, cat.TORQUE_CMD):
        name = cat.actuator_signal(actuator, q)
        if _col(frame, name) is not None:
            return name
    return None


def kpi_definitions(runs: Sequence[RunData], tip_edges: np.ndarray | None) -> list[KpiDef]:
    """The KPIs that every run given can supply, in display order.

    Parameters
    ----------
    runs : sequence of RunData
        All runs of both versions; a KPI is kept only if each of them has its signal.
    tip_edges : ndarray or None
        Histogram edges of the tip-over margin quantile (None: no quantile KPI). [-]
    """

    def everyone(where: str, name: str) -> bool:
        return all(_col(r.series if where == "s" else r.frame, name) is not None for r in runs)

    actuators = [a.name for a in runs[0].profile.actuators]
    wheels = [w.name for w in runs[0].profile.wheels().values()]
    out: list[KpiDef] = []
    for a in actuators:
        if everyone("s", f"{a}.{cat.SATURATED}"):
            out.append(
                KpiDef(f"{a}.saturation_share", "saturation_share", a,
                       f"Saturated share of time, {a}", "-", LOWER,
                       Statistic("ratio", f"sat.{a}", f"sat_time.{a}"))
            )  # fmt: skip
    for w in sorted(wheels):
        if everyone("s", f"{w}.{cat.SLIP_SPEED}"):
            out.append(
                KpiDef(f"{w}.slip_events", "slip_events", w, f"Slip events, {w}", "count",
                       LOWER, Statistic("total", f"slip_events.{w}"))
            )  # fmt: skip
            out.append(
                KpiDef(f"{w}.peak_slip_speed", "peak_slip_speed", w, f"Peak |slip speed|, {w}",
                       "m/s", LOWER, Statistic("max", f"slip_peak.{w}"))
            )  # fmt: skip
    if everyone("s", cat.TIP_MARGIN):
        out.append(
            KpiDef("min_tip_margin", "min_tip_margin", None, "Minimum tip-over margin", "-",
                   HIGHER, Statistic("min", "tip_min"))
        )  # fmt: skip
        if tip_edges is not None:
            out.append(
                KpiDef("tip_margin_p1", "tip_margin_p1", None,
                       "Tip-over margin, 1st percentile", "-", HIGHER,
                       Statistic("quantile", "tip_hist", q=0.01, edges=tip_edges))
            )  # fmt: skip
    if everyone("s", cat.ROLL_ERROR):
        out += [
            KpiDef("roll_error_rms", "roll_error_rms", None, "Roll error RMS", "rad", LOWER,
                   Statistic("rms", "roll_e2", "roll_time")),
            KpiDef("roll_error_max", "roll_error_max", None, "Roll error max |e|", "rad", LOWER,
                   Statistic("max", "roll_max")),
            KpiDef("roll_error_iae", "roll_error_iae", None, "Roll error IAE", "rad*s", LOWER,
                   Statistic("total", "roll_abs")),
        ]  # fmt: skip
    if everyone("f", cat.ROLL_REF) and everyone("f", cat.ROLL):
        out.append(KpiDef("roll_lag", "roll_lag", None, "Roll lag |behind or ahead of| reference", "s",
                          LOWER, None))  # fmt: skip
    out += [
        KpiDef("mean_speed", "mean_speed", None, "Mean speed", "m/s", HIGHER,
               Statistic("ratio", "dist", "time")),
        KpiDef("time_to_complete", "time_to_complete", None, "Time to complete", "s", LOWER,
               Statistic("total", "time")),
    ]  # fmt: skip
    if not any("balance" in r.skipped for r in runs):  # falls come from events: 0 if never looked
        out.append(
            KpiDef("falls", "falls", None, "Falls", "count", LOWER, Statistic("total", "falls"))
        )
    for a in actuators:
        if all(
            _torque_name(r.frame, a) is not None
            and _col(r.frame, cat.actuator_signal(a, cat.VEL)) is not None
            for r in runs
        ):
            out.append(
                KpiDef(f"{a}.energy", "energy", a, f"Mechanical energy, {a}", "J", LOWER,
                       Statistic("total", f"energy.{a}"))
            )  # fmt: skip
    return out


def _sum_by_block(block: np.ndarray, ok: np.ndarray, values: np.ndarray, n: int) -> np.ndarray:
    sel = ok & (block >= 0)
    return np.bincount(block[sel], weights=values[sel], minlength=n)[:n]


def _extreme_by_block(
    block: np.ndarray, values: np.ndarray, n: int, *, largest: bool
) -> np.ndarray:
    sel = np.isfinite(values) & (block >= 0)
    out = np.full(n, -np.inf if largest else np.inf)
    (np.maximum if largest else np.minimum).at(out, block[sel], values[sel])
    out[~np.isfinite(out)] = np.nan
    return out


def _blocks_of(position: np.ndarray, edges: np.ndarray) -> np.ndarray:
    """Block index of each position, -1 outside the blocks."""
    b = np.searchsorted(edges, position, side="right") - 1
    b[(position < edges[0]) | (position > edges[-1])] = -1
    return np.minimum(b, edges.size - 2)


def _event_blocks(
    events: Sequence[Event], t: np.ndarray, position: np.ndarray, edges: np.ndarray, clip: bool
) -> np.ndarray:
    """Block of each event's start (by its course position); -1 outside unless clipped."""
    if not events:
        return np.zeros(0, dtype=int)
    pos = np.interp([e.start_s for e in events], t, position)
    if clip:
        pos = np.clip(pos, edges[0], edges[-1])
    return _blocks_of(np.asarray(pos, dtype=float), edges)


def block_pieces(
    run: RunData,
    position: np.ndarray,
    speed: np.ndarray,
    edges: np.ndarray,
    kpis: Sequence[KpiDef],
) -> dict[str, np.ndarray]:
    """Per-block pieces of one run for the given KPIs.

    Parameters
    ----------
    run : RunData
    position : ndarray
        Course position of each frame sample (distance plus the run's offset). [m]
    speed : ndarray
        Forward speed magnitude of each frame sample. [m/s]
    edges : ndarray
        Block boundaries on the course. [m]
    kpis : sequence of KpiDef
        Which pieces are needed.

    Returns
    -------
    dict of ndarray
        Pieces by name, each of length ``n_blocks`` (``tip_hist``: n_blocks x bins).

    Notes
    -----
    Sums are ``sum_i f_i w_i`` with ``w_i`` the sample durations (trapezoid
    rule). Energy per actuator: ``E = integral |tau omega| dt`` ([2] Eq. 10-55).
    Roll error IAE: ``integral |e| dt`` ([1] Eq. 5.56).
    """
    n = edges.size - 1
    t = run.frame[cat.T].to_numpy(dtype=float)
    blk = _blocks_of(position, edges)
    st = run.series[cat.T].to_numpy(dtype=float) if cat.T in run.series else t
    s_pos = np.interp(st, t, position)
    s_blk = _blocks_of(s_pos, edges)
    w_all = sample_durations(t)
    out: dict[str, np.ndarray] = {
        "time": _sum_by_block(blk, np.ones(t.size, bool), w_all, n),
        "dist": _sum_by_block(blk, np.ones(t.size, bool), speed * w_all, n),
    }
    falls = [e for e in run.events if e.kind == cat.FALL]
    out["falls"] = np.bincount(_event_blocks(falls, t, position, edges, clip=True), minlength=n)[
        :n
    ].astype(float)
    wanted = {k.metric: k for k in kpis}
    for k in kpis:
        if k.metric == "saturation_share" and k.channel:
            x = _col(run.series, f"{k.channel}.{cat.SATURATED}")
            x = np.full(st.size, np.nan) if x is None else x
            ok = np.isfinite(x)
            w = sample_durations(st, ok)
            out[f"sat.{k.channel}"] = _sum_by_block(s_blk, ok, np.nan_to_num(x) * w, n)
            out[f"sat_time.{k.channel}"] = _sum_by_block(s_blk, ok, w, n)
        elif k.metric == "slip_events" and k.channel:
            ev = [e for e in run.events if e.kind == cat.SLIP and e.channel == k.channel]
            b = _event_blocks(ev, t, position, edges, clip=False)
            out[f"slip_events.{k.channel}"] = np.bincount(b[b >= 0], minlength=n)[:n].astype(float)
        elif k.metric == "peak_slip_speed" and k.channel:
            x = _col(run.series, f"{k.channel}.{cat.SLIP_SPEED}")
            x = np.full(st.size, np.nan) if x is None else np.abs(x)
            out[f"slip_peak.{k.channel}"] = _extreme_by_block(s_blk, x, n, largest=True)
        elif k.metric == "energy" and k.channel:
            tq = _torque_name(run.frame, k.channel)
            tau = _col(run.frame, tq) if tq else None
            om = _col(run.frame, cat.actuator_signal(k.channel, cat.VEL))
            if tau is None or om is None:
                continue
            p = np.abs(tau * om)  # [2] Eq. 10-55
            ok = np.isfinite(p)
            w = sample_durations(t, ok)
            out[f"energy.{k.channel}"] = _sum_by_block(blk, ok, np.nan_to_num(p) * w, n)
    if "min_tip_margin" in wanted or "tip_margin_p1" in wanted:
        m = _col(run.series, cat.TIP_MARGIN)
        m = np.full(st.size, np.nan) if m is None else m
        out["tip_min"] = _extreme_by_block(s_blk, m, n, largest=False)
        p1 = wanted.get("tip_margin_p1")
        if p1 is not None and p1.stat is not None:
            e = p1.stat.edges
            ok = np.isfinite(m) & (s_blk >= 0)
            j = np.clip(np.searchsorted(e, m[ok], side="right") - 1, 0, e.size - 2)
            hist = np.zeros((n, e.size - 1))
            np.add.at(hist, (s_blk[ok], j), 1.0)
            out["tip_hist"] = hist
    if "roll_error_rms" in wanted:
        e_col = _col(run.series, cat.ROLL_ERROR)
        e = np.full(st.size, np.nan) if e_col is None else e_col
        ok = np.isfinite(e)
        w = sample_durations(st, ok)
        ez = np.nan_to_num(e)
        out["roll_e2"] = _sum_by_block(s_blk, ok, ez * ez * w, n)
        out["roll_abs"] = _sum_by_block(s_blk, ok, np.abs(ez) * w, n)  # [1] Eq. 5.56
        out["roll_time"] = _sum_by_block(s_blk, ok, w, n)
        out["roll_max"] = _extreme_by_block(s_blk, np.abs(e), n, largest=True)
    return out


def tip_edges(runs: Sequence[RunData], bins: int = TIP_BINS) -> np.ndarray | None:
    """Shared histogram edges of the tip-over margin over all runs (None if absent)."""
    values = [_col(r.series, cat.TIP_MARGIN) for r in runs]
    if any(v is None for v in values):
        return None
    lo = min(float(np.nanmin(v)) for v in values if v is not None)
    hi = max(float(np.nanmax(v)) for v in values if v is not None)
    if not hi > lo:
        hi = lo + 1e-6
    return np.linspace(lo, hi, bins + 1)
