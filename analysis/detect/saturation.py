"""Actuator saturation: where a drive was asked for more torque than it could give.

Per actuator of the profile:

- with ``torque_req`` (before the limiter) and ``torque_cmd`` (after it) both
  logged, the actuator is saturated where ``|torque_req| > |torque_cmd| + eps``
  (the limiter cut the request);
- otherwise it is saturated where the command reaches the available torque,
  ``|torque_cmd| >= (1 - tol) * torque_available(|vel|)``; the available torque
  is the peak rating, or with motor constants the DC-motor torque-speed line
  capped at the peak (:func:`torque_available`).

It also tracks the thermal load: the RMS of the torque over a sliding window
(default 10 s), against the continuous rating.

References
----------
.. [1] A. Hughes and B. Drury, Electric Motors and Drives: Fundamentals, Types
   and Applications, 5th ed. Newnes, 2019, ch. 3 (d.c. motor steady-state
   characteristics).
"""

from __future__ import annotations

from typing import Any

import numpy as np
import pandas as pd

from analysis import catalogue as cat
from analysis.events import DetectorResult, Event, find_intervals, intervals_to_events
from analysis.kinematics import column, sample_weights, time_share
from analysis.profile import Actuator, RobotProfile, Thresholds

DETECTOR = "saturation"
METHOD_REQUEST = "request beyond limiter"
METHOD_AVAILABLE = "at available torque"


def torque_available(
    speed: np.ndarray | float,
    actuator: Actuator,
    torque: np.ndarray | float | None = None,
) -> np.ndarray:
    """Torque the drive can give at a joint speed.

    Parameters
    ----------
    speed : ndarray or float
        Joint speed. [rad/s]
    actuator : Actuator
        Actuator with ``peak_torque`` [N*m] and optional motor constants.
    torque : ndarray or float, optional
        Torque asked of the drive, for its direction only: where it opposes the
        speed the drive is braking. Without it every sample is taken as motoring.
        [N*m]

    Returns
    -------
    ndarray
        Available torque magnitude, same shape as ``speed``. [N*m]

    Notes
    -----
    Without motor constants the available torque is the peak rating at every
    speed. With them it is the steady-state torque-speed line of a DC motor fed
    at the bus voltage V ([1], ch. 3): armature current ``I = (V - k_e w) / R``
    and torque ``k_t I``, so

        tau = k_t (V - k_e |w|) / R, capped at the peak torque, floored at 0.

    Stall torque (w = 0) is ``k_t V / R``; the no-load speed (tau = 0) is
    ``V / k_e``. That is the motoring quadrant. When braking (torque opposing
    the speed) a four-quadrant drive applies -V and the back-EMF adds to it:
    ``I = (V + k_e |w|) / R``, so

        tau_brake = k_t (V + k_e |w|) / R, capped at the peak torque.
    """
    w_signed = np.asarray(speed, dtype=float)
    w = np.abs(w_signed)
    peak = actuator.peak_torque
    m = actuator.motor
    if m is None:
        return np.full(w.shape, peak, dtype=float)
    tau = m.k_t * (m.bus_voltage - m.k_e * w) / m.resistance  # [1] ch. 3, motoring
    if torque is not None:
        braking = np.asarray(torque, dtype=float) * w_signed < 0
        tau_brake = m.k_t * (m.bus_voltage + m.k_e * w) / m.resistance  # [1] ch. 3, braking
        tau = np.where(braking, tau_brake, tau)
    return np.clip(tau, 0.0, peak)


def window_starts(t: np.ndarray, window_s: float) -> tuple[np.ndarray, np.ndarray]:
    """Where each trailing window ``(t_i - W, t_i]`` starts, for linear interpolation.

    Returns ``(j, frac)`` with ``t_i - W = t[j] + frac (t[j+1] - t[j])`` and
    ``0 <= frac < 1`` (``j = 0, frac = 0`` before the first sample), so that a
    cumulative sum ``c`` reads ``c[j] + frac (c[j+1] - c[j])`` there, as
    ``np.interp(t - W, t, c)`` would. Found once and shared by every signal on
    the same time axis. ``t`` increasing, at least two samples, ``W > 0``.
    """
    start = t - window_s
    j = np.searchsorted(t, start, side="right") - 1  # t[j] <= start < t[j + 1]
    before = j < 0
    # with W > 0, start < t_i <= t[-1], so t[j + 1] > t[j]; the clip is for W = 0 (frac 1)
    np.clip(j, 0, t.size - 2, out=j)
    frac = (start - t[j]) / (t[j + 1] - t[j])
    frac[before] = 0.0
    return j, frac


def sliding_rms(
    t: np.ndarray,
    x: np.ndarray,
    window_s: float,
    starts: tuple[np.ndarray, np.ndarray] | None = None,
) -> np.ndarray:
    """Trailing time-window RMS, time-weighted, skipping data gaps and NaN.

    Parameters
    ----------
    t : ndarray
        Sample times, increasing. [s]
    x : ndarray
        Signal; NaN samples carry no weight. [unit]
    window_s : float
        Window length W; the value at ``t_i`` covers ``(t_i - W, t_i]``. [s]
    starts : tuple of ndarray, optional
        ``window_starts(t, window_s)``, when already found for another signal.

    Returns
    -------
    ndarray
        RMS over the logged time inside each window (over less than W near the
        start of the run); NaN where the window holds no logged time. [unit]

    Notes
    -----
    ``RMS = sqrt(integral(x^2 dt) / T_logged)`` over the window, with the
    integral by the trapezoidal rule on each sample interval that is not a
    data gap. Both the integral and the logged time are cumulative sums, read
    at the window's two ends by linear interpolation in t (:func:`window_starts`),
    so the cost does not grow with the window.
    """
    t = np.asarray(t, dtype=float)
    x = np.asarray(x, dtype=float)
    n = t.size
    if n < 2:
        return np.full(n, np.nan)  # one sample covers no time
    h = sample_weights(t)[:-1]  # interval lengths, 0 across data gaps
    sq = x * x
    seg_sq = 0.5 * (sq[:-1] + sq[1:])
    ok = np.isfinite(seg_sq) & (h > 0)
    energy = np.concatenate(([0.0], np.cumsum(np.where(ok, seg_sq * h, 0.0))))
    logged = np.concatenate(([0.0], np.cumsum(np.where(ok, h, 0.0))))
    j, frac = window_starts(t, window_s) if starts is None else starts
    e0 = energy[j] + frac * (energy[j + 1] - energy[j])
    l0 = logged[j] + frac * (logged[j + 1] - logged[j])
    span = logged - l0
    with np.errstate(invalid="ignore", divide="ignore"):
        rms = np.sqrt(np.maximum(energy - e0, 0.0) / span)
    rms[span <= 1e-12 * max(window_s, 1.0)] = np.nan
    return rms


def _saturation_mask(
    t: np.ndarray,
    act: Actuator,
    req: np.ndarray | None,
    cmd: np.ndarray | None,
    available: np.ndarray,
    th: Thresholds,
) -> tuple[np.ndarray, np.ndarray, np.ndarray, str, str, dict[str, Any]]:
    """Saturated and valid masks, the signal for the event peak, its name and method."""
    if req is not None and cmd is not None:
        eps = act.saturation_eps if act.saturation_eps is not None else th.saturation_eps
        valid = np.isfinite(req) & np.isfinite(cmd)
        with np.errstate(invalid="ignore"):
            sat = (np.abs(req) > np.abs(cmd) + eps) & valid
        name = cat.actuator_signal(act.name, cat.TORQUE_REQ)
        return sat, valid, req, name, METHOD_REQUEST, {"eps": eps}
    tol = act.saturation_tol if act.saturation_tol is not None else th.saturation_tol
    quantity, sig = (cat.TORQUE_CMD, cmd) if cmd is not None else (cat.TORQUE_REQ, req)
    if sig is None:
        raise ValueError(f"{act.name}: neither torque_cmd nor torque_req was given.")
    valid = np.isfinite(sig) & np.isfinite(available)
    with np.errstate(invalid="ignore"):
        a = np.abs(sig)
        sat = (a >= (1.0 - tol) * available) & (a > 0) & valid
    name = cat.actuator_signal(act.name, quantity)
    return sat, valid, sig, name, METHOD_AVAILABLE, {"tol": tol}


def _analyse_actuator(
    frame: pd.DataFrame,
    t: np.ndarray,
    act: Actuator,
    th: Thresholds,
    starts: tuple[np.ndarray, np.ndarray] | None = None,
) -> tuple[dict[str, np.ndarray], list[Event], dict[str, Any], list[str]] | str:
    """Series, events, KPIs and notes of one actuator, or the reason it was left out."""
    req = column(frame, cat.actuator_signal(act.name, cat.TORQUE_REQ))
    cmd = column(frame, cat.actuator_signal(act.name, cat.TORQUE_CMD))
    meas = column(frame, cat.actuator_signal(act.name, cat.TORQUE))
    vel_name = cat.actuator_signal(act.name, cat.VEL)
    vel = column(frame, vel_name)
    if req is None and cmd is None:
        return (
            f"{act.name}: no {cat.actuator_signal(act.name, cat.TORQUE_CMD)} or "
            f"{cat.actuator_signal(act.name, cat.TORQUE_REQ)}; map the drive's commanded "
            f"(and requested) torque in the channel map to check it for saturation"
        )
    notes: list[str] = []
    if act.motor is not None and vel is None:
        available = np.full(t.size, act.peak_torque)
        notes.append(
            f"{act.name}: no {vel_name}; available torque taken as the peak torque instead of "
            f"the torque-speed line. Map the joint velocity to use the motor constants."
        )
    else:
        asked = cmd if cmd is not None else req
        available = torque_available(vel if vel is not None else np.zeros(t.size), act, asked)
    sat, valid, sig, sig_name, method, limit = _saturation_mask(t, act, req, cmd, available, th)
    if method == METHOD_AVAILABLE and cmd is None:
        notes.append(
            f"{act.name}: no {cat.actuator_signal(act.name, cat.TORQUE_CMD)}; the request was "
            f"compared with the available torque instead."
        )
    flag = np.where(valid, sat.astype(float), np.nan)
    intervals = find_intervals(
        t, flag, 0.5, 0.5, min_duration_s=th.min_duration_s, merge_gap_s=th.merge_gap_s
    )
    detail = {"signal": sig_name, "unit": "N*m", "method": method, **limit}
    events = intervals_to_events(t, sig, intervals, cat.SATURATION, act.name, detail=detail)

    rms_src = next(x for x in (meas, cmd, req) if x is not None)
    rms = sliding_rms(t, rms_src, th.thermal_window_s, starts)
    kpis: dict[str, Any] = {
        "method": method,
        "saturated_share": time_share(t, sat, valid),
        "event_count": len(events),
        "longest_event_s": max((e.duration_s for e in events), default=0.0),
    }
    kpis.update(_thermal_kpis(t, rms, act, th, notes))
    series = {
        f"{act.name}.{cat.TORQUE_AVAILABLE}": available,
        f"{act.name}.{cat.SATURATED}": sat,
        f"{act.name}.{cat.TORQUE_RMS}": rms,
    }
    return series, events, kpis, notes


def _thermal_kpis(
    t: np.ndarray, rms: np.ndarray, act: Actuator, th: Thresholds, notes: list[str]
) -> dict[str, Any]:
    """Worst full-window RMS torque, its ratio to the continuous rating and its window."""
    full = (t - t[0]) >= th.thermal_window_s * (1 - 1e-9)
    if not full.any():
        full = np.zeros(t.size, dtype=bool)
        full[-1] = True
        notes.append(
            f"{act.name}: the run ({t[-1] - t[0]:.3g} s) is shorter than the thermal window "
            f"({th.thermal_window_s:.3g} s); the RMS torque covers the whole run."
        )
    cand = np.where(full & np.isfinite(rms), rms, -np.inf)
    if not np.isfinite(cand).any():
        return {
            "torque_rms_worst": None,
            "torque_rms_ratio": None,
            "torque_rms_worst_start_s": None,
            "torque_rms_worst_end_s": None,
            "continuous_torque": act.continuous_torque,
        }
    i = int(np.argmax(cand))
    worst = float(rms[i])
    return {
        "torque_rms_worst": worst,
        "torque_rms_ratio": worst / act.continuous_torque,
        "torque_rms_worst_start_s": float(max(t[i] - th.thermal_window_s, t[0])),
        "torque_rms_worst_end_s": float(t[i]),
        "continuous_torque": act.continuous_torque,
    }


def detect_saturation(
    frame: pd.DataFrame, profile: RobotProfile, thresholds: Thresholds | None = None
) -> DetectorResult:
    """Find where each actuator was saturated, and its thermal load.

    Parameters
    ----------
    frame : DataFrame
        Analysis frame: ``t`` [s] plus catalogue columns ``<act>.torque_req``,
        ``<act>.torque_cmd``, ``<act>.torque`` [N*m] and ``<act>.vel`` [rad/s].
    profile : RobotProfile
        Actuators with their ratings and optional motor constants.
    thresholds : Thresholds, optional
        Defaults to ``profile.thresholds``.

    Returns
    -------
    DetectorResult
        Events of kind ``saturation`` (channel = actuator; peak = request, or
        command, of largest magnitude [N*m]); series ``<act>.torque_available``
        [N*m], ``<act>.saturated`` [bool], ``<act>.torque_rms`` [N*m]; KPIs per
        actuator: ``saturated_share`` [-], ``event_count``, ``longest_event_s``
        [s], ``torque_rms_worst`` [N*m], ``torque_rms_ratio`` [-] and the worst
        window's ``torque_rms_worst_start_s``/``_end_s`` [s].

    Notes
    -----
    See :func:`torque_available` and :func:`sliding_rms`. The share of time is
    weighted by the sample intervals and leaves out data gaps and samples
    where the needed signals are missing.
    """
    th = thresholds if thresholds is not None else profile.thresholds
    if cat.T not in frame.columns or len(frame) == 0:
        return DetectorResult(DETECTOR, skipped="the run has no samples (no t column or no rows)")
    t = frame[cat.T].to_numpy(dtype=float)
    result = DetectorResult(DETECTOR)
    series: dict[str, Any] = {cat.T: t}
    left_out: list[str] = []
    # the thermal windows start at the same places for every actuator
    starts = window_starts(t, th.thermal_window_s) if t.size >= 2 else None
    for act in profile.actuators:
        out = _analyse_actuator(frame, t, act, th, starts)
        if isinstance(out, str):
            left_out.append(out)
            continue
        s, events, kpis, notes = out
        series.update(s)
        result.events.extend(events)
        result.kpis[act.name] = kpis
        result.notes.extend(notes)
    if not result.kpis:
        return DetectorResult(
            DETECTOR, skipped="; ".join(left_out) or "the profile has no actuators"
        )
    result.notes.extend(f"Not analysed: {reason}." for reason in left_out)
    result.series = pd.DataFrame(series)
    result.events.sort(key=lambda e: (e.start_s, e.channel or ""))
    return result
