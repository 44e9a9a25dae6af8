"""Ground truth of a demo run: the events its true states hold, by the README's definitions.

This module is the outside reference the detectors are measured against, so it
shares no code with them: it imports nothing of ``analysis`` but the signal and
event names of the catalogue and the demo's own robot constants. Its event rule
is written here, in a few lines, from the README ("Analysis: what is detected"
and the thresholds table), and it works on the simulator's true, noise-free
states, never on the logged (measured) signals:

- an event starts at the first sample where the condition passes its "on"
  threshold and ends at the last sample before it falls back past "off";
- events of one kind and channel less than ``merge_gap_s`` apart are one event;
- events shorter than ``min_duration_s`` are dropped.

The thresholds are the README's defaults (:data:`DEFINITIONS`); a test checks
that they still equal the profile's defaults, so that a changed default is
noticed here too.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from analysis import catalogue as cat
from analysis.demo import course as dc


@dataclass(frozen=True)
class Definitions:
    """Thresholds of the README's event definitions, in SI (README "Thresholds" table)."""

    min_duration_s: float = 0.05  # s
    merge_gap_s: float = 0.25  # s
    saturation_eps: float = 0.05  # N*m
    slip_ratio_on: float = 0.2  # -
    slip_ratio_off: float = 0.1  # -
    slip_speed_min: float = 0.1  # m/s
    slip_min_ref_speed: float = 0.5  # m/s
    yaw_rate_diff_on: float = float(np.deg2rad(15.0))  # rad/s
    yaw_rate_diff_off: float = float(np.deg2rad(8.0))  # rad/s
    tip_margin_on: float = 0.3  # -
    tip_margin_off: float = 0.35  # -
    roll_band: float = float(np.deg2rad(3.0))  # rad
    pitch_limit: float = float(np.deg2rad(20.0))  # rad
    fall_pitch: float = float(np.deg2rad(45.0))  # rad
    fall_end_window_s: float = 1.0  # s


DEFINITIONS = Definitions()


@dataclass
class PlantedEvent:
    """One interval of something the generator caused, from its true states.

    ``kind`` is a key of ``catalogue.EVENT_KINDS``; ``channel`` an actuator or
    wheel name, or None for whole-robot events; ``start_s`` and ``end_s`` the
    first and last sample times of the interval. [s]
    """

    kind: str
    channel: str | None
    start_s: float
    end_s: float


def spans(
    t: np.ndarray, start: np.ndarray, hold: np.ndarray, d: Definitions = DEFINITIONS
) -> list[tuple[float, float]]:
    """Time intervals that begin where ``start`` holds and last while ``hold`` holds.

    Parameters
    ----------
    t : ndarray
        Sample times. [s]
    start, hold : ndarray of bool
        The "on" condition, and the condition that keeps an event going.
    d : Definitions
        Merge gap and minimum duration.

    Returns
    -------
    list of (start_s, end_s)
        First and last sample time of each event. [s]
    """
    found: list[list[float]] = []
    i0: int | None = None
    for i in range(t.size):
        if i0 is None and start[i]:
            i0 = i
        elif i0 is not None and not hold[i]:
            found.append([t[i0], t[i - 1]])
            i0 = None
    if i0 is not None:
        found.append([t[i0], t[-1]])
    merged: list[list[float]] = []
    for a, b in found:
        if merged and a - merged[-1][1] <= d.merge_gap_s:
            merged[-1][1] = b
        else:
            merged.append([a, b])
    return [(a, b) for a, b in merged if b - a >= d.min_duration_s]


def planted_truth(
    t: np.ndarray,
    st: dict[str, np.ndarray],
    true: dict[str, np.ndarray],
    t_torque: np.ndarray,
    torque_index: np.ndarray,
    d: Definitions = DEFINITIONS,
) -> list[PlantedEvent]:
    """The events the run holds, from its true states, by the README's definitions.

    Parameters
    ----------
    t : ndarray
        Times of the true states. [s]
    st : dict of ndarray
        True state histories of the simulator (``theta`` pitch, ``<act>_req``,
        ``<act>_cmd`` torques, ...). [SI]
    true : dict of ndarray
        True derived series (contact and rim speeds, yaw rates, tip margin, roll
        error). [SI]
    t_torque : ndarray
        Time stamps of the torque log. [s]
    torque_index : ndarray of int
        State step of each torque sample.
    d : Definitions
        Thresholds.

    Returns
    -------
    list of PlantedEvent
        Sorted by kind (catalogue order), channel and start.

    Notes
    -----
    - saturation: ``|torque_req| > |torque_cmd| + eps``, on the torque log's times;
    - slip: ``|slip ratio| > on`` with ``|rim - contact speed| > slip_speed_min``,
      until ``|slip ratio| < off``; slip ratio = (rim - contact speed) /
      max(|contact speed|, floor), contact speeds the true ones;
    - yaw_slip: ``|yaw rate from the wheels - true yaw rate|`` beyond on / off;
    - low_tip_margin: the true margin below on, until above off;
    - roll_error: ``|roll_ref - roll| > roll_band``;
    - pitch_excursion: ``|pitch| > pitch_limit``; fall: ``|pitch| > fall_pitch``,
      or ``|pitch| > pitch_limit`` over the whole last ``fall_end_window_s``.
    """
    events: list[PlantedEvent] = []

    def add(kind: str, channel: str | None, found: list[tuple[float, float]]) -> None:
        events.extend(PlantedEvent(kind, channel, float(a), float(b)) for a, b in found)

    for act in dc.ACTUATORS:
        req = np.abs(st[f"{act}_req"][torque_index])
        cmd = np.abs(st[f"{act}_cmd"][torque_index])
        over = req > cmd + d.saturation_eps
        add(cat.SATURATION, act, spans(t_torque, over, over, d))
    for side in ("l", "r"):
        wheel = f"wheel_{side}"
        v_c = true[f"{wheel}.{cat.CONTACT_SPEED}"]
        slip = st[f"slip_{side}"]  # the simulator's slip state: rim minus contact speed
        ratio = np.abs(slip) / np.maximum(np.abs(v_c), d.slip_min_ref_speed)
        fast = np.abs(slip) > d.slip_speed_min
        on, hold = fast & (ratio > d.slip_ratio_on), fast & (ratio > d.slip_ratio_off)
        add(cat.SLIP, wheel, spans(t, on, hold, d))
    diff = np.abs(true[cat.YAW_RATE_WHEELS] - true["yaw_rate"])
    add(cat.YAW_SLIP, None, spans(t, diff > d.yaw_rate_diff_on, diff > d.yaw_rate_diff_off, d))
    margin = true[cat.TIP_MARGIN]
    add(cat.LOW_TIP_MARGIN, None, spans(t, margin < d.tip_margin_on, margin < d.tip_margin_off, d))
    err = np.abs(st["phi_ref"] - st["phi"])
    add(cat.ROLL_ERROR, None, spans(t, err > d.roll_band, err > d.roll_band, d))
    pitch = np.abs(st["theta"])
    beyond = pitch > d.pitch_limit
    add(cat.PITCH_EXCURSION, None, spans(t, beyond, beyond, d))
    fallen = pitch > d.fall_pitch
    tail = t >= t[-1] - d.fall_end_window_s
    if t.size and beyond[tail].all():
        first = int(np.flatnonzero(~beyond)[-1] + 1) if (~beyond).any() else 0
        fallen = fallen.copy()
        fallen[first:] = True
    add(cat.FALL, None, spans(t, fallen, fallen, d))
    order = list(cat.EVENT_KINDS)
    events.sort(key=lambda e: (order.index(e.kind), e.channel or "", e.start_s))
    return events
