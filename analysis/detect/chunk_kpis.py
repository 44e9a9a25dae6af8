"""Whole-run KPIs of an analysis done in time chunks, from sums kept chunk by chunk.

:mod:`analysis.detect.chunked` runs every detector on overlapping time chunks of
a run. Events and derived series are stitched from the chunks; a KPI, though,
is a statement about the whole run (a share of time, an integral, an extreme),
and a chunk's own KPI covers its margins too. So each detector's KPIs are
rebuilt here from quantities that add up exactly over the chunks' cores: each
core contributes the sample intervals that start inside it (the first sample
of the next core closes its last interval), so every interval of the run is
counted once. The definitions are those of the detectors (the same helpers,
:func:`analysis.kinematics.time_share`, :func:`analysis.metrics.time_where`,
:func:`analysis.metrics.integrate`, ...); only the summation order differs,
so the KPIs agree with a whole-run pass to floating-point rounding.

A detector whose KPIs this module does not know makes the chunked analysis
fall back to one whole-run pass (:data:`KNOWN`), so a new detector is never
reported with chunk-local KPIs.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd

from analysis import catalogue as cat
from analysis.detect.saturation import METHOD_REQUEST
from analysis.detect.slip import SPIN
from analysis.detect.tipover import F_Z_MIN, _side
from analysis.events import Event, mask_of_events
from analysis.kinematics import column, sample_weights
from analysis.metrics import integrate, interval_halves, logged_time, sample_durations
from analysis.profile import RobotProfile, Thresholds

#: Detectors whose KPIs are rebuilt here.
KNOWN = frozenset({"saturation", "slip", "tip", "roll", "balance"})


@dataclass
class _Extreme:
    """Running extreme with the time it was first reached (earliest wins ties)."""

    value: float = float("nan")
    t_s: float = float("nan")
    extra: float = float("nan")

    def offer(
        self, value: float, t_s: float, extra: float = float("nan"), lower: bool = False
    ) -> None:
        if not np.isfinite(value):
            return
        if not np.isfinite(self.value) or (value < self.value if lower else value > self.value):
            self.value, self.t_s, self.extra = value, t_s, extra


@dataclass
class _Share:
    """Numerator and denominator of a time share, summed over chunk cores. [s]"""

    inside: float = 0.0
    total: float = 0.0

    def ratio(self) -> float | None:
        return self.inside / self.total if self.total > 0 else None


def _share_hold(hold: np.ndarray, mask: np.ndarray, valid: np.ndarray, acc: _Share) -> None:
    """Add a core's part of :func:`analysis.kinematics.time_share` (zero-order hold).

    ``hold``: ``sample_weights(t)`` of the core. [s]"""
    w = hold * valid
    acc.total += float(w.sum())
    acc.inside += float((w * mask).sum())


def _share_durations(
    t: np.ndarray, halves: np.ndarray, cond: np.ndarray, valid: np.ndarray, acc: _Share
) -> None:
    """Add a core's part of :func:`analysis.metrics.time_where` (half intervals).

    ``halves``: ``interval_halves(t)`` of the core. [s]"""
    w = sample_durations(t, valid, halves)
    acc.total += float(w.sum())
    acc.inside += float(w[cond & valid].sum())


#: The percentile of the tip margin reported (``p1_margin``). [%]
P1 = 1.0


def lowest_needed(samples: int, q: float = P1) -> int:
    """How many of the lowest of at most ``samples`` values the ``q``-th percentile reads.

    numpy's default (linear) percentile of n values interpolates between the sorted
    values at ``floor(h)`` and ``floor(h) + 1`` with ``h = q / 100 (n - 1)``
    (numpy.percentile, method "linear"; Hyndman and Fan (1996) definition 7).
    """
    return int(math.floor(q / 100.0 * max(samples - 1, 0))) + 2


class LowestValues:
    """The lowest values of a stream seen in parts, for an exact low percentile.

    Keeps at most ``keep`` values (all when None), so that the 1st percentile of an
    8-hour run needs 1 % of its samples in memory, not all of them.
    """

    def __init__(self, keep: int | None) -> None:
        self.keep = keep
        self.count = 0
        self._parts: list[np.ndarray] = []
        self._held = 0

    def add(self, values: np.ndarray) -> None:
        """Add values (no NaN)."""
        self.count += int(values.size)
        self._parts.append(np.array(values, dtype=float, copy=True))
        self._held += int(values.size)
        if self.keep is not None and self._held > 2 * self.keep:
            self._shrink()

    def _shrink(self) -> None:
        v = np.concatenate(self._parts)
        if self.keep is not None and v.size > self.keep:
            v = np.partition(v, self.keep - 1)[: self.keep]
        self._parts, self._held = [v], int(v.size)

    def percentile(self, q: float) -> float:
        """``numpy.percentile(all values, q)`` (method "linear"), bit for bit."""
        if not self.count:
            return float("nan")
        self._shrink()
        v = np.sort(self._parts[0])
        n = self.count
        h = q / 100.0 * (n - 1)
        lo = int(math.floor(h))
        hi = min(lo + 1, n - 1)
        if hi >= v.size:
            raise ValueError(
                f"the {q:g}th percentile of {n} values needs the lowest {hi + 1}; "
                f"only {v.size} were kept"
            )
        a, b, t = v[lo], v[hi], h - lo
        # numpy's _lerp: a + (b - a) t, from the upper end when t >= 0.5 (numpy 2.x,
        # numpy/lib/_function_base_impl.py)
        d = b - a
        return float(b - d * (1.0 - t) if t >= 0.5 else a + d * t)


@dataclass
class ChunkKpis:
    """Sums and extremes of every detector's KPIs, fed one chunk core at a time.

    ``add`` takes the core's rows plus the first row of the next core (``closing``
    True) so that the last interval of the core is counted; ``finish`` gives the
    KPIs of the whole run in the shape the detectors return.
    """

    profile: RobotProfile
    th: Thresholds
    t_first: float
    first_kpis: dict[str, Any]
    sums: dict[str, Any] = field(default_factory=dict)
    #: Samples of the whole run (an upper bound of the valid margins), so that only the
    #: lowest margins the 1st percentile can need are kept; None keeps every margin.
    samples: int | None = None
    margins: LowestValues = field(init=False)
    unsupported_samples: int = 0
    # the current core's sample_weights(t) and interval_halves(t), set by add [s]
    _hold: np.ndarray = field(init=False, repr=False)
    _halves: np.ndarray = field(init=False, repr=False)

    def __post_init__(self) -> None:
        self.margins = LowestValues(None if self.samples is None else lowest_needed(self.samples))

    def _get(self, key: str, make: Any) -> Any:
        if key not in self.sums:
            self.sums[key] = make()
        return self.sums[key]

    def add(
        self,
        frame: pd.DataFrame,
        series: pd.DataFrame,
        events: list[Event],
        closing: bool,
    ) -> None:
        """Add one chunk core (frame and series rows, with the closing row if any)."""
        t = frame[cat.T].to_numpy(dtype=float)
        if t.size == 0:
            return
        own = slice(0, t.size - 1 if closing else t.size)  # samples that belong to the core
        # the core's sample weights, found once for all its signals
        self._hold, self._halves = sample_weights(t), interval_halves(t)
        for name in self.first_kpis:
            getattr(self, f"_add_{name}")(t, frame, series, events, own)

    # --- saturation ------------------------------------------------------------------
    def _add_saturation(
        self,
        t: np.ndarray,
        frame: pd.DataFrame,
        series: pd.DataFrame,
        events: list[Event],
        own: slice,
    ) -> None:
        for act in self.profile.actuators:
            kp = self.first_kpis["saturation"].get(act.name)
            if kp is None:
                continue
            req = column(frame, cat.actuator_signal(act.name, cat.TORQUE_REQ))
            cmd = column(frame, cat.actuator_signal(act.name, cat.TORQUE_CMD))
            avail = series[f"{act.name}.{cat.TORQUE_AVAILABLE}"].to_numpy(dtype=float)
            sat = series[f"{act.name}.{cat.SATURATED}"].to_numpy(dtype=bool)
            if kp["method"] == METHOD_REQUEST and req is not None and cmd is not None:
                valid = np.isfinite(req) & np.isfinite(cmd)
            else:
                sig = cmd if cmd is not None else req
                valid = np.isfinite(np.asarray(sig)) & np.isfinite(avail)
            _share_hold(self._hold, sat, valid, self._get(f"sat.{act.name}.share", _Share))
            rms = series[f"{act.name}.{cat.TORQUE_RMS}"].to_numpy(dtype=float)[own]
            full = (t[own] - self.t_first) >= self.th.thermal_window_s * (1 - 1e-9)
            cand = np.where(full & np.isfinite(rms), rms, -np.inf)
            if np.isfinite(cand).any():
                i = int(np.argmax(cand))
                self._get(f"sat.{act.name}.rms", _Extreme).offer(float(rms[i]), float(t[own][i]))

    def _finish_saturation(self, events: list[Event]) -> dict[str, Any]:
        out: dict[str, Any] = {}
        for act in self.profile.actuators:
            kp = self.first_kpis["saturation"].get(act.name)
            if kp is None:
                continue
            mine = [e for e in events if e.kind == cat.SATURATION and e.channel == act.name]
            worst = self.sums.get(f"sat.{act.name}.rms", _Extreme())
            ok = np.isfinite(worst.value)
            out[act.name] = {
                "method": kp["method"],
                "saturated_share": self.sums[f"sat.{act.name}.share"].ratio(),
                "event_count": len(mine),
                "longest_event_s": max((e.duration_s for e in mine), default=0.0),
                "torque_rms_worst": worst.value if ok else None,
                "torque_rms_ratio": worst.value / act.continuous_torque if ok else None,
                "torque_rms_worst_start_s": (
                    float(max(worst.t_s - self.th.thermal_window_s, self.t_first)) if ok else None
                ),
                "torque_rms_worst_end_s": worst.t_s if ok else None,
                "continuous_torque": act.continuous_torque,
            }
        return out

    # --- slip ------------------------------------------------------------------------
    def _add_slip(
        self,
        t: np.ndarray,
        frame: pd.DataFrame,
        series: pd.DataFrame,
        events: list[Event],
        own: slice,
    ) -> None:
        for act in self.profile.wheels().values():
            name = f"{act.name}.{cat.SLIP_SPEED}"
            if name not in series:
                continue
            slip = series[name].to_numpy(dtype=float)
            valid = np.isfinite(slip)
            mine = [e for e in events if e.kind == cat.SLIP and e.channel == act.name]
            _share_hold(
                self._hold, mask_of_events(t, mine), valid, self._get(f"slip.{act.name}", _Share)
            )
            a = np.abs(slip[own])
            if np.isfinite(a).any():
                self._get(f"slip.{act.name}.peak", _Extreme).offer(float(np.nanmax(a)), 0.0)
        if cat.YAW_RATE_WHEELS in series:
            diff = series[cat.YAW_RATE_WHEELS].to_numpy(dtype=float) - column(frame, cat.YAW_RATE)
            w = self._hold * np.isfinite(diff)
            acc = self._get("slip.yaw", _Share)
            acc.total += float(w.sum())
            acc.inside += float(np.nansum(w * diff * diff))

    def _finish_slip(self, events: list[Event]) -> dict[str, Any]:
        out: dict[str, Any] = {}
        for act in self.profile.wheels().values():
            if act.name not in self.first_kpis["slip"]:
                continue
            mine = [e for e in events if e.kind == cat.SLIP and e.channel == act.name]
            n_spin = sum(e.detail.get("direction") == SPIN for e in mine)
            peak = self.sums.get(f"slip.{act.name}.peak", _Extreme())
            out[act.name] = {
                "event_count": len(mine),
                "spin_count": n_spin,
                "skid_count": len(mine) - n_spin,
                "peak_slip_speed": peak.value if np.isfinite(peak.value) else None,
                "slipping_share": self.sums[f"slip.{act.name}"].ratio(),
            }
        if cat.YAW_SLIP in self.first_kpis["slip"]:
            acc = self.sums.get("slip.yaw", _Share())
            out[cat.YAW_SLIP] = {
                "event_count": sum(e.kind == cat.YAW_SLIP for e in events),
                "yaw_rate_diff_rms": (
                    float(np.sqrt(acc.inside / acc.total)) if acc.total > 0 else None
                ),
            }
        return out

    # --- tip -------------------------------------------------------------------------
    def _add_tip(
        self,
        t: np.ndarray,
        frame: pd.DataFrame,
        series: pd.DataFrame,
        events: list[Event],
        own: slice,
    ) -> None:
        margin = series[cat.TIP_MARGIN].to_numpy(dtype=float)
        y_zmp = series[cat.ZMP_Y].to_numpy(dtype=float)
        valid = np.isfinite(margin)
        _share_durations(
            t, self._halves, margin < self.th.tip_margin_on, valid, self._get("tip.below", _Share)
        )
        roll = column(frame, cat.ROLL)
        f_z = series[cat.SPECIFIC_FORCE_Z].to_numpy(dtype=float)
        L_c = series[cat.COM_HEIGHT].to_numpy(dtype=float)
        with np.errstate(invalid="ignore"):
            unsupported = (f_z < F_Z_MIN) & np.isfinite(np.asarray(roll)) & np.isfinite(L_c)
        _share_durations(t, self._halves, unsupported, valid, self._get("tip.unsupported", _Share))
        self.unsupported_samples += int(unsupported[own].sum())
        tv, mv, yv = t[own][valid[own]], margin[own][valid[own]], y_zmp[own][valid[own]]
        if mv.size:
            self.margins.add(mv)
            k = int(np.argmin(mv))
            self._get("tip.min", _Extreme).offer(float(mv[k]), float(tv[k]), lower=True)
            ok = np.isfinite(yv)
            if ok.any():
                k = int(np.argmin(np.where(ok, mv, np.inf)))
                self._get("tip.side", _Extreme).offer(float(mv[k]), 0.0, float(yv[k]), lower=True)
        for key, name in (("tip.ssf", cat.STATIC_STABILITY_FACTOR), ("tip.fa", cat.FORCE_ANGLE)):
            x = series[name].to_numpy(dtype=float)[own]
            if np.isfinite(x).any():
                self._get(key, _Extreme).offer(float(np.nanmin(x)), 0.0, lower=True)

    def _finish_tip(self, events: list[Event]) -> dict[str, Any]:
        first = self.first_kpis["tip"]
        low = self.sums.get("tip.min", _Extreme())
        if not np.isfinite(low.value):
            return {"method": first["method"], "min_margin": None}
        side = self.sums.get("tip.side", _Extreme())
        below = self.sums["tip.below"]
        ssf, fa = self.sums.get("tip.ssf", _Extreme()), self.sums.get("tip.fa", _Extreme())
        return {
            "min_margin": low.value,
            "min_margin_t_s": low.t_s,
            "p1_margin": self.margins.percentile(P1),
            "time_below_s": below.inside,
            "share_below": below.inside / below.total if below.total > 0 else float("nan"),
            "side_of_min": _side(side.extra) if np.isfinite(side.value) else None,
            "unsupported_s": self.sums["tip.unsupported"].inside,
            "event_count": sum(e.kind == cat.LOW_TIP_MARGIN for e in events),
            "min_static_stability_factor": ssf.value if np.isfinite(ssf.value) else None,
            "min_force_angle": fa.value if np.isfinite(fa.value) else None,
            "method": first["method"],
            "accel_cutoff_hz": float(self.th.accel_cutoff),
        }

    # --- roll ------------------------------------------------------------------------
    def _add_roll(
        self,
        t: np.ndarray,
        frame: pd.DataFrame,
        series: pd.DataFrame,
        events: list[Event],
        own: slice,
    ) -> None:
        e = series[cat.ROLL_ERROR].to_numpy(dtype=float)
        valid = np.isfinite(e)
        band = float(self.th.roll_band)
        s = self._get("roll", dict)
        for key, f in (
            ("iae", np.abs(e)),
            ("ise", e * e),
            ("itae", (t - self.t_first) * np.abs(e)),
        ):
            s[key] = s.get(key, 0.0) + integrate(t, f)
        s["logged"] = s.get("logged", 0.0) + logged_time(t, e * e)
        with np.errstate(invalid="ignore"):
            _share_durations(
                t, self._halves, np.abs(e) <= band, valid, self._get("roll.band", _Share)
            )
        a = np.abs(e[own])
        if np.isfinite(a).any():
            self._get("roll.max", _Extreme).offer(float(np.nanmax(a)), 0.0)

    def _finish_roll(self, events: list[Event]) -> dict[str, Any]:
        s = self.sums.get("roll", {})
        top = self.sums.get("roll.max", _Extreme())
        if not np.isfinite(top.value):
            return {"rms": None}
        logged = s.get("logged", 0.0)
        return {
            "rms": float(np.sqrt(s["ise"] / logged)) if logged > 0 else float("nan"),
            "max_abs": top.value,
            "iae": s["iae"],
            "ise": s["ise"],
            "itae": s["itae"],
            "share_in_band": self.sums["roll.band"].ratio()
            if self.sums["roll.band"].total > 0
            else float("nan"),
            "band": float(self.th.roll_band),
            # lag_s, lag_correlation, lag_at_bound: set by the caller from whole columns
            "event_count": sum(e.kind == cat.ROLL_ERROR for e in events),
        }

    # --- balance ---------------------------------------------------------------------
    def _add_balance(
        self,
        t: np.ndarray,
        frame: pd.DataFrame,
        series: pd.DataFrame,
        events: list[Event],
        own: slice,
    ) -> None:
        pitch = column(frame, cat.PITCH)
        if pitch is None:
            return
        a = np.abs(pitch[own])
        if np.isfinite(a).any():
            self._get("balance.max", _Extreme).offer(float(np.nanmax(a)), 0.0)

    def _finish_balance(self, events: list[Event]) -> dict[str, Any]:
        excursions = [e for e in events if e.kind == cat.PITCH_EXCURSION]
        falls = [e for e in events if e.kind == cat.FALL]
        fall_time = falls[0].start_s if falls else None
        top = self.sums.get("balance.max", _Extreme())
        return {
            "excursion_count": len(excursions),
            "max_abs_pitch": top.value if np.isfinite(top.value) else None,
            "fell": bool(falls),
            "fall_time_s": fall_time,
            "fall_reason": falls[0].detail["reason"] if falls else None,
            "fall_count": len(falls),
            "excursions_after_fall": (
                sum(1 for e in excursions if fall_time is not None and e.start_s > fall_time)
            ),
        }

    def finish(self, events: list[Event]) -> dict[str, Any]:
        """KPIs by detector, for the detectors that ran."""
        return {name: getattr(self, f"_finish_{name}")(events) for name in self.first_kpis}
