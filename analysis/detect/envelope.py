"""Actuator operating envelope: where in torque and joint speed an actuator was driven.

Answers "how close to the motor's limits did we drive": a 2-D density of the
operating points (joint speed, torque) over a run or a time window, with the
actuator's peak and continuous torque and, when the profile has motor constants,
the DC-motor torque-speed line in the motoring and the braking quadrants.
"""

from __future__ import annotations

from collections.abc import Callable, Iterable
from typing import Any

import numpy as np
import pandas as pd

from analysis import catalogue as cat
from analysis.detect.saturation import torque_available
from analysis.kinematics import column
from analysis.profile import Actuator

#: Bins of the density along each axis. [-]
DEFAULT_BINS = 60
#: Points of each limit line. [-]
LINE_POINTS = 121


def envelope_torque(frame: pd.DataFrame, actuator: str) -> tuple[np.ndarray | None, str | None]:
    """The torque to place on the envelope: measured when logged, else the command.

    Returns
    -------
    (ndarray or None, str or None)
        The torque [N*m] and the catalogue name it came from.
    """
    for quantity in (cat.TORQUE, cat.TORQUE_CMD, cat.TORQUE_REQ):
        name = cat.actuator_signal(actuator, quantity)
        values = column(frame, name)
        if values is not None:
            return values, name
    return None, None


def operating_density(
    speed: np.ndarray,
    torque: np.ndarray,
    *,
    speed_range: tuple[float, float],
    torque_range: tuple[float, float],
    bins: int = DEFAULT_BINS,
    weights: np.ndarray | None = None,
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """2-D density of operating points: share of time in each (speed, torque) cell.

    Parameters
    ----------
    speed, torque : ndarray
        Joint speed [rad/s] and torque [N*m] per sample; NaN samples are left out.
    speed_range, torque_range : (float, float)
        Axis ranges of the grid. [rad/s], [N*m]
    bins : int
        Cells along each axis. [-]
    weights : ndarray, optional
        Time each sample stands for (uneven sampling, gaps); equal when None. [s]

    Returns
    -------
    (share, speed_edges, torque_edges)
        ``share[i, j]`` is the share of the valid time with speed in cell i and
        torque in cell j [-]; the cell edges [rad/s], [N*m].
    """
    speed = np.asarray(speed, dtype=float)
    torque = np.asarray(torque, dtype=float)
    ok = np.isfinite(speed) & np.isfinite(torque)
    w = None if weights is None else np.asarray(weights, dtype=float)[ok]
    counts, s_edges, q_edges = np.histogram2d(
        speed[ok], torque[ok], bins=bins, range=[speed_range, torque_range], weights=w
    )
    total = counts.sum()
    share = counts / total if total > 0 else counts
    return share, s_edges, q_edges


def limit_lines(actuator: Actuator, speed_max: float) -> dict[str, Any]:
    """Limit lines of an actuator over joint speed in [-speed_max, speed_max].

    Returns
    -------
    dict
        ``speed`` grid [rad/s]; ``peak`` and ``continuous`` ratings [N*m]; and,
        with motor constants, ``motoring_upper`` / ``motoring_lower`` (the
        torque the drive can give in the motoring quadrants, +/-) and
        ``braking_upper`` / ``braking_lower`` (braking quadrants) [N*m], from
        :func:`analysis.detect.saturation.torque_available` (DC motor line).
    """
    w = np.linspace(-speed_max, speed_max, LINE_POINTS)
    out: dict[str, Any] = {
        "speed": w,
        "peak": actuator.peak_torque,
        "continuous": actuator.continuous_torque,
        "motor": actuator.motor is not None,
    }
    if actuator.motor is not None:
        positive = np.ones_like(w)
        # Positive torque motors where w > 0 and brakes where w < 0, and the mirror.
        upper = torque_available(w, actuator, torque=positive)
        lower = -torque_available(w, actuator, torque=-positive)
        out["upper"] = upper
        out["lower"] = lower
    return out


def actuator_envelope(
    frame: pd.DataFrame,
    actuator: Actuator,
    *,
    saturated: np.ndarray | None = None,
    t0: float | None = None,
    t1: float | None = None,
    bins: int = DEFAULT_BINS,
    max_marks: int = 2000,
) -> dict[str, Any] | None:
    """Everything the envelope picture draws for one actuator.

    Parameters
    ----------
    frame : DataFrame
        The run's frame (catalogue names, SI, column ``t``).
    actuator : Actuator
        The actuator, with its ratings and optional motor constants.
    saturated : ndarray of bool, optional
        Saturated samples (the saturation detector's series), on the frame's time
        base; their operating points are returned as marks (at most ``max_marks``).
    t0, t1 : float, optional
        Time window; the whole run when None. [s]
    bins : int
        Cells along each axis. [-]

    Returns
    -------
    dict or None
        None when the frame has no joint speed or no torque for the actuator.
        Else SI values: density ``share`` (speed x torque), ``speed_edges``,
        ``torque_edges``, limit lines, ``torque_source``, sample count, the peak
        |torque| seen and the share of time above the continuous rating.
    """
    t = frame[cat.T].to_numpy(dtype=float)
    speed = column(frame, cat.actuator_signal(actuator.name, cat.VEL))
    torque, source = envelope_torque(frame, actuator.name)
    if speed is None or torque is None:
        return None
    keep = np.ones(len(t), dtype=bool)
    if t0 is not None:
        keep &= t >= t0
    if t1 is not None:
        keep &= t <= t1
    speed, torque = speed[keep], torque[keep]
    sat = None if saturated is None else np.asarray(saturated, dtype=bool)[keep]
    valid = np.isfinite(speed) & np.isfinite(torque)
    n_valid = int(valid.sum())
    speed_max = float(np.nanmax(np.abs(speed))) if n_valid else 1.0
    speed_max = max(speed_max * 1.05, 1e-3)
    if actuator.motor is not None:
        m = actuator.motor
        speed_max = max(speed_max, min(m.bus_voltage / m.k_e, 3 * speed_max))
    torque_max = max(actuator.peak_torque * 1.1, float(np.nanmax(np.abs(torque))) if n_valid else 0)
    share, s_edges, q_edges = operating_density(
        speed,
        torque,
        speed_range=(-speed_max, speed_max),
        torque_range=(-torque_max, torque_max),
        bins=bins,
    )
    marks: dict[str, list[float]] = {"speed": [], "torque": []}
    if sat is not None:
        idx = np.flatnonzero(sat & valid)
        if len(idx) > max_marks:
            idx = idx[np.linspace(0, len(idx) - 1, max_marks).round().astype(int)]
        marks = {"speed": speed[idx].tolist(), "torque": torque[idx].tolist()}
    above = np.abs(torque[valid]) > actuator.continuous_torque
    return {
        "actuator": actuator.name,
        "torque_source": source,
        "samples": n_valid,
        "share": share,
        "speed_edges": s_edges,
        "torque_edges": q_edges,
        "lines": limit_lines(actuator, speed_max),
        "saturated_points": marks,
        "peak_abs_torque": float(np.max(np.abs(torque[valid]))) if n_valid else None,
        "share_above_continuous": float(above.mean()) if n_valid else None,
    }


#: A source of a run's rows in consecutive chunks: each call starts over and yields
#: (frame, saturated flags on the frame's rows or None).
Chunks = Callable[[], Iterable[tuple[pd.DataFrame, np.ndarray | None]]]


def _chunk_signals(
    frame: pd.DataFrame, actuator: Actuator
) -> tuple[np.ndarray | None, np.ndarray | None, str | None]:
    speed = column(frame, cat.actuator_signal(actuator.name, cat.VEL))
    torque, source = envelope_torque(frame, actuator.name)
    return speed, torque, source


def actuator_envelope_chunks(
    chunks: Chunks,
    actuator: Actuator,
    *,
    bins: int = DEFAULT_BINS,
    max_marks: int = 2000,
) -> dict[str, Any] | None:
    """:func:`actuator_envelope` of a run read in chunks, in bounded memory.

    Two passes over ``chunks()`` (each chunk's rows already inside the wanted time
    window): the first finds the axis ranges, the counts and the peak torque, the
    second fills the density (counts per cell add up exactly) and picks the
    saturated marks, the same samples as :func:`actuator_envelope` picks from the
    whole run. The saturated flags are used only when every chunk has them for
    every row (as the whole-run picture needs them for every row).
    """
    first = True
    source: str | None = None
    n_valid = n_above = n_marked = 0
    speed_peak = torque_peak = valid_peak = -np.inf
    flags = True
    for frame, sat in chunks():
        speed, torque, src = _chunk_signals(frame, actuator)
        if first:
            first, source = False, src
            if speed is None or torque is None:
                return None
        if speed is None or torque is None or not len(frame):
            continue
        valid = np.isfinite(speed) & np.isfinite(torque)
        n_valid += int(valid.sum())
        with np.errstate(invalid="ignore"):  # an all-NaN chunk: no peak from it
            speed_peak = max(speed_peak, float(np.nanmax(np.abs(speed), initial=-np.inf)))
            torque_peak = max(torque_peak, float(np.nanmax(np.abs(torque), initial=-np.inf)))
        on = np.abs(torque[valid])
        valid_peak = max(valid_peak, float(on.max(initial=-np.inf)))
        n_above += int((on > actuator.continuous_torque).sum())
        if sat is None or len(sat) != len(frame):
            flags = False
        else:
            n_marked += int((np.asarray(sat, dtype=bool) & valid).sum())
    if first:
        return None  # no chunk: no columns to look at
    # the same axis ranges as actuator_envelope (nanmax over every sample of the window)
    speed_max = speed_peak if n_valid and np.isfinite(speed_peak) else 1.0
    speed_max = max(speed_max * 1.05, 1e-3)
    if actuator.motor is not None:
        m = actuator.motor
        speed_max = max(speed_max, min(m.bus_voltage / m.k_e, 3 * speed_max))
    torque_max = max(actuator.peak_torque * 1.1, torque_peak if n_valid else 0)
    ranges = [(-speed_max, speed_max), (-torque_max, torque_max)]
    counts = np.zeros((bins, bins))
    s_edges = q_edges = np.empty(0)
    # the marks: saturated valid samples number 0 .. n-1 of the window, evenly picked
    pick = np.arange(n_marked)
    if n_marked > max_marks:
        pick = np.linspace(0, n_marked - 1, max_marks).round().astype(int)
    marks: dict[str, list[float]] = {"speed": [], "torque": []}
    seen = 0
    for frame, sat in chunks():
        speed, torque, _ = _chunk_signals(frame, actuator)
        if speed is None or torque is None:
            continue
        ok = np.isfinite(speed) & np.isfinite(torque)
        c, s_edges, q_edges = np.histogram2d(speed[ok], torque[ok], bins=bins, range=ranges)
        counts += c
        if flags and sat is not None:
            idx = np.flatnonzero(np.asarray(sat, dtype=bool) & ok)
            lo, hi = np.searchsorted(pick, [seen, seen + idx.size])
            mine = idx[pick[lo:hi] - seen]
            marks["speed"] += speed[mine].tolist()
            marks["torque"] += torque[mine].tolist()
            seen += idx.size
    if not s_edges.size:  # no rows at all: the edges of an empty density
        _, s_edges, q_edges = np.histogram2d([], [], bins=bins, range=ranges)
    total = counts.sum()
    return {
        "actuator": actuator.name,
        "torque_source": source,
        "samples": n_valid,
        "share": counts / total if total > 0 else counts,
        "speed_edges": s_edges,
        "torque_edges": q_edges,
        "lines": limit_lines(actuator, speed_max),
        "saturated_points": marks,
        "peak_abs_torque": valid_peak if n_valid else None,
        "share_above_continuous": n_above / n_valid if n_valid else None,
    }
