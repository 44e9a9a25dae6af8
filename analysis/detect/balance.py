"""Balance excursions: pitch beyond the profile limit, and falls.

A wheel-legged robot balances like an inverted pendulum in pitch. The detector
marks a ``pitch_excursion`` where ``|pitch|`` goes beyond ``pitch_limit`` and a
``fall`` where it goes beyond ``fall_pitch`` (past the angle the controller can
recover from) or where the run ends tilted (``|pitch|`` beyond ``pitch_limit``
over the last ``fall_end_window_s`` of logged pitch). A fall explains
everything that follows it in the log (saturated wheels, slip, lost lean), so
the KPIs carry the time of the first fall for the dashboard and the comparison
to mark later events.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from analysis import catalogue as cat
from analysis.events import DetectorResult, Event, find_intervals, intervals_to_events
from analysis.profile import RobotProfile, Thresholds

#: A pitch_excursion ends where |pitch| falls below this fraction of pitch_limit,
#: so a pitch hovering at the limit gives one event, not many (common practice,
#: no source). [-]
PITCH_EXIT_FRACTION = 0.9

REASON_FALL_PITCH = "beyond_fall_pitch"
REASON_ENDED_TILTED = "ended_tilted"


def _direction(peak: float) -> str:
    return "nose_down" if peak > 0 else "nose_up"


def _ended_tilted(
    tv: np.ndarray, abs_pitch: np.ndarray, th: Thresholds
) -> tuple[tuple[int, int] | None, bool]:
    """The final stretch beyond pitch_limit if it reaches the end and lasts the window.

    Returns the (start, end) index interval (or None) and whether the logged
    pitch is shorter than the window (so the rule could not be applied).
    """
    if tv[-1] - tv[0] < th.fall_end_window_s:
        return None, True
    beyond = find_intervals(
        tv, abs_pitch, th.pitch_limit, th.pitch_limit, min_duration_s=0.0, merge_gap_s=0.0
    )
    if not beyond:
        return None, False
    a, b = beyond[-1]
    if b == tv.size - 1 and tv[b] - tv[a] >= th.fall_end_window_s:
        return (a, b), False
    return None, False


def detect_balance(
    frame: pd.DataFrame, profile: RobotProfile, thresholds: Thresholds | None = None
) -> DetectorResult:
    """Pitch excursions and falls.

    Parameters
    ----------
    frame : DataFrame
        Column ``t`` [s] and ``pitch`` [rad, positive nose down].
    profile : RobotProfile
        Supplies the default thresholds.
    thresholds : Thresholds, optional
        Defaults to ``profile.thresholds``; uses ``pitch_limit``, ``fall_pitch``
        [rad], ``fall_end_window_s``, ``min_duration_s``, ``merge_gap_s`` [s].

    Returns
    -------
    DetectorResult
        ``detector="balance"``; events ``pitch_excursion`` (enter above
        ``pitch_limit``, leave below ``PITCH_EXIT_FRACTION * pitch_limit``) and
        ``fall`` (from where ``|pitch|`` passes ``fall_pitch`` until it is back
        within ``pitch_limit``; or the final stretch beyond ``pitch_limit`` when
        the run ends tilted, joined to a fall it overlaps);
        ``peak`` is the signed pitch of largest magnitude [rad]. KPIs
        ``excursion_count``, ``max_abs_pitch`` [rad], ``fell``, ``fall_time_s``
        (start of the first fall, or None) and ``fall_reason``.
    """
    th = thresholds if thresholds is not None else profile.thresholds
    result = DetectorResult(detector="balance")
    if cat.PITCH not in frame.columns or not frame[cat.PITCH].notna().any():
        result.skipped = (
            f"No {cat.PITCH} logged: balance excursions need the body pitch angle. Map the "
            f"IMU pitch channel to {cat.PITCH} (positive nose down) in the channel map."
        )
        return result
    t = frame[cat.T].to_numpy(dtype=float)
    pitch = frame[cat.PITCH].to_numpy(dtype=float)
    valid = np.isfinite(pitch)
    tv, pv = t[valid], pitch[valid]
    ap = np.abs(pv)
    result.series = pd.DataFrame({cat.T: t})

    common = {"signal": cat.PITCH, "unit": "rad"}
    exc_iv = find_intervals(
        tv,
        ap,
        th.pitch_limit,
        PITCH_EXIT_FRACTION * th.pitch_limit,
        min_duration_s=th.min_duration_s,
        merge_gap_s=th.merge_gap_s,
    )
    excursions = intervals_to_events(
        tv,
        pv,
        exc_iv,
        cat.PITCH_EXCURSION,
        None,
        detail={**common, "threshold": th.pitch_limit},
    )
    for ev in excursions:  # loop over events
        ev.detail["direction"] = _direction(ev.peak)

    fall_iv = find_intervals(
        tv,
        ap,
        th.fall_pitch,
        th.pitch_limit,
        min_duration_s=th.min_duration_s,
        merge_gap_s=th.merge_gap_s,
    )
    # A fall starts where |pitch| passes the recoverable angle (not where it first
    # passed pitch_limit on the way) and lasts until it is back within pitch_limit.
    beyond_fall = ap > th.fall_pitch
    fall_iv = [(a + int(np.argmax(beyond_fall[a : b + 1])), b) for a, b in fall_iv]
    reasons = [[REASON_FALL_PITCH] for _ in fall_iv]
    end_iv, too_short = _ended_tilted(tv, ap, th) if tv.size else (None, True)
    if too_short:
        result.notes.append(
            f"The logged pitch spans less than fall_end_window_s ({th.fall_end_window_s:g} s): "
            f"the 'run ended tilted' rule was not applied."
        )
    if end_iv is not None:
        overlapping = [i for i, (a, b) in enumerate(fall_iv) if b >= end_iv[0]]
        if overlapping:
            first = overlapping[0]
            fall_iv = fall_iv[:first] + [(fall_iv[first][0], end_iv[1])]
            reasons = reasons[:first] + [[REASON_FALL_PITCH, REASON_ENDED_TILTED]]
        else:
            fall_iv = [*fall_iv, end_iv]
            reasons = [*reasons, [REASON_ENDED_TILTED]]
    falls: list[Event] = intervals_to_events(
        tv, pv, fall_iv, cat.FALL, None, detail={**common, "threshold": th.fall_pitch}
    )
    for ev, why in zip(falls, reasons, strict=True):  # loop over events
        ev.detail["reason"] = why
        ev.detail["direction"] = _direction(ev.peak)

    result.events = excursions + falls
    fall_time = falls[0].start_s if falls else None
    result.kpis = {
        "excursion_count": len(excursions),
        "max_abs_pitch": float(ap.max()) if ap.size else None,
        "fell": bool(falls),
        "fall_time_s": fall_time,
        "fall_reason": falls[0].detail["reason"] if falls else None,
        "fall_count": len(falls),
        "excursions_after_fall": (
            sum(1 for e in excursions if fall_time is not None and e.start_s > fall_time)
        ),
    }
    if fall_time is not None:
        result.notes.append(
            f"The robot fell at t = {fall_time:.2f} s; events after that follow from the fall."
        )
    return result
