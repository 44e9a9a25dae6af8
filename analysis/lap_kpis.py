"""Per-lap KPIs of a multi-lap run and whether they drift over the run.

Each lap of :mod:`analysis.laps` gets the KPIs an endurance test watches: lap
time, the saturated share of time (worst actuator), wheel-slip events, the
minimum lateral tip-over margin, the roll error RMS and the mechanical energy
of all actuators. A monotonic drift of a KPI over the complete laps (the first
sign of a sagging battery or a warming motor) is tested with the Mann-Kendall
test and sized with the Theil-Sen slope (:mod:`analysis.trend`).

References
----------
.. [1] D. Halliday, R. Resnick and J. Walker, Fundamentals of Physics, 10th ed.
   Wiley, 2013. Eq. 10-55 (rotational power P = tau * omega).
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd

from analysis import catalogue as cat
from analysis.display import display_unit, scalar_to_display
from analysis.events import Event
from analysis.laps import Lap, LapSet, lap_of_samples
from analysis.metrics import interval_halves, sample_durations
from analysis.profile import RobotProfile
from analysis.trend import ALPHA, mann_kendall

LOWER = "lower"
HIGHER = "higher"


@dataclass(frozen=True)
class LapKpi:
    """One per-lap KPI: key (also the gate key prefix), label, SI unit, better direction."""

    key: str
    label: str
    unit: str
    better: str
    detector: str | None


#: The per-lap KPIs, in display order.
LAP_KPIS: tuple[LapKpi, ...] = (
    LapKpi("lap_time", "Lap time", "s", LOWER, None),
    LapKpi("saturation_share", "Saturated share of time, worst actuator", "-", LOWER, "saturation"),
    LapKpi("slip_events", "Wheel slip events", "count", LOWER, "slip"),
    LapKpi("min_tip_margin", "Minimum tip-over margin", "-", HIGHER, "tip"),
    LapKpi("roll_error_rms", "Roll error RMS", "rad", LOWER, "roll"),
    LapKpi("energy", "Mechanical energy, all actuators", "J", LOWER, None),
)
LAP_KPI_KEYS = tuple(k.key for k in LAP_KPIS)


def _col(df: pd.DataFrame, name: str) -> np.ndarray | None:
    if name not in df.columns:
        return None
    x = df[name].to_numpy(dtype=float)
    return x if np.isfinite(x).any() else None


def _per_lap_sum(lap: np.ndarray, values: np.ndarray, n: int) -> np.ndarray:
    """Sum of the finite ``values`` of each lap (``lap`` -1: no lap, left out)."""
    # bin 0 gathers the samples of no lap; a missing value adds 0 (no masked copies)
    v = np.where(np.isfinite(values), values, 0.0)
    return np.bincount(lap + 1, weights=v, minlength=n + 1)[1 : n + 1]


def _per_lap_min(lap: np.ndarray, values: np.ndarray, n: int) -> np.ndarray:
    ok = (lap >= 0) & np.isfinite(values)
    out = np.full(n, np.inf)
    np.minimum.at(out, lap[ok], values[ok])
    out[~np.isfinite(out)] = np.nan
    return out


def _torque_name(frame: pd.DataFrame, actuator: str) -> str | None:
    for q in (cat.TORQUE, cat.TORQUE_CMD):
        name = cat.actuator_signal(actuator, q)
        if _col(frame, name) is not None:
            return name
    return None


def lap_kpi_table(
    frame: pd.DataFrame,
    series: pd.DataFrame,
    events: Sequence[Event],
    laps: Sequence[Lap],
    profile: RobotProfile,
    skipped: Sequence[str] = (),
) -> pd.DataFrame:
    """The per-lap KPIs of one run.

    Parameters
    ----------
    frame : DataFrame
        Column ``t`` [s] plus canonical SI signals.
    series : DataFrame
        Derived series of the analysis on the frame's time base (``t``,
        ``<actuator>.saturated``, ``tip_margin``, ``roll_error``).
    events : sequence of Event
        The analysis events (slip events are counted by their start).
    laps : sequence of Lap
    profile : RobotProfile
    skipped : sequence of str
        Detectors that did not run: their KPIs are NaN (shown "not run").

    Returns
    -------
    DataFrame
        One row per lap: ``lap`` (number), ``partial``, ``start_s`` [s], then
        one column per :data:`LAP_KPIS` key in its SI unit.

    Notes
    -----
    Time integrals use :func:`analysis.metrics.sample_durations` (trapezoid
    weights, never across a data gap). Saturated share ``sum(sat w) / sum(w)``
    per actuator, the worst actuator kept; roll error RMS
    ``sqrt(sum(e^2 w) / sum(w))``; energy ``sum_a integral |tau_a omega_a| dt``
    ([1] Eq. 10-55).
    """
    n = len(laps)
    laps = list(laps)
    t = frame[cat.T].to_numpy(dtype=float)
    st = series[cat.T].to_numpy(dtype=float) if cat.T in series.columns else t
    if st is not t and np.array_equal(st, t):  # the usual case: one time axis
        st = t
    lap_f = lap_of_samples(t, laps)
    lap_s = lap_of_samples(st, laps) if st is not t else lap_f
    skip = set(skipped)
    nan = np.full(n, np.nan)
    # the sample intervals of each time axis, found once for all its signals
    halves_f = interval_halves(t)
    halves_s = halves_f if st is t else interval_halves(st)
    out: dict[str, Any] = {
        "lap": [lap.number for lap in laps],
        "partial": [lap.partial for lap in laps],
        "start_s": [lap.start_s for lap in laps],
        "lap_time": [lap.duration_s for lap in laps],
    }
    # saturated share, worst actuator
    shares = []
    if "saturation" not in skip:
        for a in profile.actuators:
            x = _col(series, f"{a.name}.{cat.SATURATED}")
            if x is None:
                continue
            ok = np.isfinite(x)
            w = sample_durations(st, ok, halves_s)
            num = _per_lap_sum(lap_s, np.where(ok, x, 0.0) * w, n)
            den = _per_lap_sum(lap_s, np.where(ok, w, 0.0), n)
            with np.errstate(invalid="ignore", divide="ignore"):
                shares.append(np.where(den > 0, num / np.where(den > 0, den, 1.0), np.nan))
    out["saturation_share"] = np.nanmax(np.vstack(shares), axis=0) if shares else nan
    if "slip" in skip:
        out["slip_events"] = nan
    else:
        starts = np.array([e.start_s for e in events if e.kind == cat.SLIP], dtype=float)
        li = lap_of_samples(starts, laps)
        out["slip_events"] = np.bincount(li[li >= 0], minlength=n)[:n].astype(float)
    m = None if "tip" in skip else _col(series, cat.TIP_MARGIN)
    out["min_tip_margin"] = nan if m is None else _per_lap_min(lap_s, m, n)
    e = None if "roll" in skip else _col(series, cat.ROLL_ERROR)
    if e is None:
        out["roll_error_rms"] = nan
    else:
        ok = np.isfinite(e)
        w = sample_durations(st, ok, halves_s)
        e2 = _per_lap_sum(lap_s, np.where(ok, e * e, 0.0) * w, n)
        den = _per_lap_sum(lap_s, w, n)
        with np.errstate(invalid="ignore", divide="ignore"):
            out["roll_error_rms"] = np.where(
                den > 0, np.sqrt(e2 / np.where(den > 0, den, 1)), np.nan
            )
    energy = np.zeros(n)
    found = False
    for a in profile.actuators:
        tq = _torque_name(frame, a.name)
        om = _col(frame, cat.actuator_signal(a.name, cat.VEL))
        tau = _col(frame, tq) if tq else None
        if tau is None or om is None:
            continue
        p = np.abs(tau * om)  # [1] Eq. 10-55
        ok = np.isfinite(p)
        energy += _per_lap_sum(lap_f, np.where(ok, p, 0.0) * sample_durations(t, ok, halves_f), n)
        found = True
    out["energy"] = energy if found else nan
    return pd.DataFrame(out)


def lap_drift(table: pd.DataFrame, alpha: float = ALPHA) -> dict[str, dict[str, Any]]:
    """Mann-Kendall trend of each per-lap KPI over the complete laps.

    Parameters
    ----------
    table : DataFrame
        From :func:`lap_kpi_table`.
    alpha : float
        Two-sided significance level. [-]

    Returns
    -------
    dict
        KPI key -> ``{"label", "unit", "better", "n", "s", "tau", "z", "p",
        "method", "slope_per_lap", "change", "drifts", "direction", "verdict"}``:
        ``change`` is the Theil-Sen slope times (laps - 1), the change over the
        run [KPI unit]; ``drifts`` is ``p < alpha``; ``direction`` ``rising`` or
        ``falling`` (None without a drift); ``verdict`` ``worse``, ``better`` or
        ``no drift``, or ``not run`` when the KPI has no values.
    """
    rows = table[~table["partial"].astype(bool)] if len(table) else table
    out: dict[str, dict[str, Any]] = {}
    for k in LAP_KPIS:
        x = rows[k.key].to_numpy(dtype=float) if k.key in rows else np.zeros(0)
        base = {"label": k.label, "unit": k.unit, "better": k.better}
        if not np.isfinite(x).any():
            out[k.key] = {**base, "n": 0, "drifts": False, "direction": None, "verdict": "not run"}
            continue
        tr = mann_kendall(x)
        drifts = bool(np.isfinite(tr.p) and tr.p < alpha)
        direction = None if not drifts else ("rising" if tr.s > 0 else "falling")
        if direction is None:
            verdict = "no drift"
        elif (direction == "rising") == (k.better == LOWER):
            verdict = "worse"
        else:
            verdict = "better"
        change = tr.slope * (tr.n - 1) if np.isfinite(tr.slope) else float("nan")
        d = tr.to_dict()
        out[k.key] = {
            **base,
            "n": tr.n,
            "s": tr.s,
            "tau": d["tau"],
            "z": d["z"],
            "p": d["p"],
            "method": tr.method,
            "slope_per_lap": d["slope"],
            "change": None if not np.isfinite(change) else float(change),
            "drifts": drifts,
            "direction": direction,
            "verdict": verdict,
        }
    return out


def _json_value(x: Any) -> Any:
    if isinstance(x, np.generic):
        x = x.item()
    if isinstance(x, float) and not np.isfinite(x):
        return None
    return x


def lap_report(
    frame: pd.DataFrame,
    series: pd.DataFrame,
    events: Sequence[Event],
    profile: RobotProfile,
    lapset: LapSet,
    skipped: Sequence[str] = (),
) -> dict[str, Any]:
    """Laps, per-lap KPIs and their drift as one JSON-ready dict (stored with the analysis).

    Returns
    -------
    dict
        ``lapset.to_dict()`` plus ``kpis`` (one dict per lap, KPI key -> value in
        SI, None when not run), ``kpi_defs`` and ``drift`` (see :func:`lap_drift`).
    """
    out = lapset.to_dict()
    if not lapset.laps:
        out.update({"kpis": [], "drift": {}})
    else:
        table = lap_kpi_table(frame, series, events, lapset.laps, profile, skipped)
        out["kpis"] = [
            {k: _json_value(v) for k, v in row.items()} for row in table.to_dict(orient="records")
        ]
        out["drift"] = lap_drift(table)
    out["kpi_defs"] = [
        {"key": k.key, "label": k.label, "unit": k.unit, "better": k.better} for k in LAP_KPIS
    ]
    return out


def display_laps(report: dict[str, Any] | None) -> dict[str, Any] | None:
    """A stored lap report with every value in the unit shown to people.

    Parameters
    ----------
    report : dict or None
        From :func:`lap_report` (SI; roll error in rad), as stored with the analysis.

    Returns
    -------
    dict or None
        The report with ``kpi_defs[*].unit`` the shown unit, every per-lap value and
        each drift's ``slope_per_lap`` and ``change`` converted (rad becomes deg by
        :func:`analysis.display.scalar_to_display`); None when there is no report.
    """
    if report is None:
        return None
    si = {k.key: k.unit for k in LAP_KPIS}
    out = dict(report)
    out["kpi_defs"] = [
        {**d, "unit": display_unit(si.get(d["key"], d["unit"]))[0]}
        for d in report.get("kpi_defs", [])
    ]
    rows = []
    for row in report.get("kpis", []):
        shown = dict(row)
        for key, unit in si.items():
            if key in shown:
                shown[key] = scalar_to_display(shown[key], unit)[0]
        rows.append(shown)
    out["kpis"] = rows
    drift = {}
    for key, d in report.get("drift", {}).items():
        shown = dict(d)
        unit = si.get(key, d.get("unit", ""))
        for field_name in ("slope_per_lap", "change"):
            if field_name in shown:
                shown[field_name] = scalar_to_display(shown[field_name], unit)[0]
        shown["unit"] = display_unit(unit)[0]
        drift[key] = shown
    out["drift"] = drift
    return out
