"""Wheel slip: where a wheel's rim speed departed from its contact's ground speed.

Per wheel, the rim speed from the encoder (plus the body pitch rate when the
encoder is referenced to the leg) is compared with the ground speed of the
wheel's contact, obtained from the base velocity estimate with the rigid-body
lever arm and the yaw-rate split across the track (see
:mod:`analysis.kinematics`). Slip speed ``v_rim - v_contact`` and the SAE J670
longitudinal slip ratio give ``slip`` events, each labelled spin (rim ahead of
the ground in the drive direction) or skid (rim lagging). An independent check
compares the yaw rate implied by the two wheels with the gyro (``yaw_slip``).

References
----------
.. [1] SAE J670, Vehicle Dynamics Terminology. SAE International, 2008
   (longitudinal slip ratio).
.. [2] H. B. Pacejka, Tire and Vehicle Dynamics, 3rd ed.
   Butterworth-Heinemann, 2012, ch. 1 (longitudinal slip kappa = -V_sx / |V_x|).
.. [3] R. Siegwart, I. R. Nourbakhsh and D. Scaramuzza, Introduction to
   Autonomous Mobile Robots, 2nd ed. MIT Press, 2011, ch. 3.
"""

from __future__ import annotations

from typing import Any

import numpy as np
import pandas as pd

from analysis import catalogue as cat
from analysis.events import (
    DetectorResult,
    Event,
    find_intervals,
    intervals_to_events,
    mask_of_events,
)
from analysis.kinematics import (
    column,
    contact_midpoint_speed,
    contact_speeds,
    rim_speed,
    sample_weights,
    time_share,
    yaw_rate_from_wheels,
)
from analysis.metrics import lowpass_zero_phase
from analysis.profile import RobotProfile, Thresholds

DETECTOR = "slip"

#: Cut-off of the zero-phase low-pass on the slip speed before the slip-speed gate
#: (half the rate of an event of the 0.05 s default minimum duration; engineering
#: choice, no source). The ratio, the series and the peaks stay unfiltered. [Hz]
GATE_CUTOFF_HZ = 10.0
SPIN = "spin"
SKID = "skid"


def slip_ratio(v_rim: np.ndarray, v_contact: np.ndarray, min_ref_speed: float) -> np.ndarray:
    """Longitudinal slip ratio with a floor on the reference speed.

    Parameters
    ----------
    v_rim : ndarray
        Rim speed, forward positive. [m/s]
    v_contact : ndarray
        Ground speed of the wheel contact, forward positive. [m/s]
    min_ref_speed : float
        Floor of the denominator, so that near-zero ground speed gives no
        false slip. [m/s]

    Returns
    -------
    ndarray
        ``kappa``; positive when the rim runs ahead while moving forward. [-]

    Notes
    -----
    ``kappa = (v_rim - v_contact) / max(|v_contact|, v_min)`` ([1]; [2] ch.
    1, ``-V_sx / |V_x|``, the sign taken so that driving slip is
    positive). The floor ``v_min`` is ours: at a standstill ``|v_contact|``
    tends to 0 and any encoder noise would give an unbounded ratio.
    """
    v_rim = np.asarray(v_rim, dtype=float)
    v_contact = np.asarray(v_contact, dtype=float)
    ref = np.maximum(np.abs(v_contact), min_ref_speed)
    with np.errstate(invalid="ignore", divide="ignore"):
        return (v_rim - v_contact) / ref  # [1]


def spin_or_skid(v_rim: np.ndarray, v_contact: np.ndarray, min_ref_speed: float) -> np.ndarray:
    """True where the slip is a spin, False where it is a skid.

    Parameters
    ----------
    v_rim, v_contact : ndarray
        Rim and contact ground speed, forward positive. [m/s]
    min_ref_speed : float
        Below this ground speed the rim's own motion sets the drive direction. [m/s]

    Returns
    -------
    ndarray of bool
        Spin: the rim runs ahead of the ground in the drive direction,
        ``(v_rim - v_contact) * sign(v_contact) > 0`` (positive SAE slip, [1]);
        with the ground nearly still (``|v_contact| < min_ref_speed``), spin
        where ``|v_rim| > |v_contact|``. Skid otherwise (the rim lags: braking
        slip, or a locked wheel).
    """
    v_rim = np.asarray(v_rim, dtype=float)
    v_contact = np.asarray(v_contact, dtype=float)
    moving = np.abs(v_contact) >= min_ref_speed
    ahead_moving = (v_rim - v_contact) * np.sign(v_contact) > 0
    ahead_still = np.abs(v_rim) > np.abs(v_contact)
    return np.where(moving, ahead_moving, ahead_still)


def _missing_base(frame: pd.DataFrame, leg_referenced: bool) -> str | None:
    """Reason the detector cannot run for lack of a base signal, or None."""
    needs = [
        (cat.VEL_X, "map the state estimator's base forward velocity in the channel map"),
        (cat.YAW_RATE, "map the gyro's yaw (z) rate in the channel map"),
    ]
    if leg_referenced:
        needs.append(
            (
                cat.PITCH_RATE,
                "the profile says the wheel encoders are referenced to the leg, so the body "
                "pitch rate is needed: map the gyro's pitch (y) rate in the channel map",
            )
        )
    for name, fix in needs:
        if name not in frame.columns:
            return f"no {name}: {fix}"
    return None


def _mean_leg_length(frame: pd.DataFrame, notes: list[str]) -> np.ndarray | None:
    """Mean of the two leg lengths per sample (one leg alone if only one is logged)."""
    legs = [
        x
        for x in (column(frame, cat.LEG_L_LENGTH), column(frame, cat.LEG_R_LENGTH))
        if x is not None
    ]
    if not legs:
        notes.append(
            f"No {cat.LEG_L_LENGTH} or {cat.LEG_R_LENGTH}: the base velocity was used at the "
            f"wheel contacts without the lever-arm correction; map the leg lengths to apply it."
        )
        return None
    if len(legs) == 1:
        return legs[0]
    pair = np.vstack(legs)
    count = np.isfinite(pair).sum(axis=0)
    total = np.nansum(pair, axis=0)
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(count > 0, total / count, np.nan)


def _wheel_events(
    t: np.ndarray,
    name: str,
    v_rim: np.ndarray,
    v_contact: np.ndarray,
    th: Thresholds,
) -> tuple[dict[str, np.ndarray], list[Event], dict[str, Any]]:
    """Series, slip events and KPIs of one wheel."""
    slip = v_rim - v_contact
    kappa = slip_ratio(v_rim, v_contact, th.slip_min_ref_speed)
    # The speed gate looks at the slip speed low-passed at GATE_CUTOFF_HZ: sensor noise
    # (encoder quantisation, estimator noise) is fast, a slip lasts min_duration or more.
    steady_slip = lowpass_zero_phase(t, slip, GATE_CUTOFF_HZ)
    with np.errstate(invalid="ignore"):
        gated = np.where(np.abs(steady_slip) > th.slip_speed_min, np.abs(kappa), 0.0)
    gated[~np.isfinite(kappa)] = np.nan
    intervals = find_intervals(
        t,
        gated,
        th.slip_ratio_on,
        th.slip_ratio_off,
        min_duration_s=th.min_duration_s,
        merge_gap_s=th.merge_gap_s,
    )
    spin = spin_or_skid(v_rim, v_contact, th.slip_min_ref_speed)
    detail = {
        "signal": f"{name}.{cat.SLIP_SPEED}",
        "unit": "m/s",
        "slip_ratio_on": th.slip_ratio_on,
        "slip_speed_min": th.slip_speed_min,
    }
    events = intervals_to_events(t, slip, intervals, cat.SLIP, name, detail=detail)
    for (a, b), ev in zip(intervals, events, strict=True):
        seg = np.abs(slip[a : b + 1])
        i = a + int(np.nanargmax(seg))
        ev.detail["direction"] = SPIN if spin[i] else SKID
        ev.detail["slip_ratio_peak"] = float(kappa[i])
    n_spin = sum(e.detail["direction"] == SPIN for e in events)
    valid = np.isfinite(slip)
    kpis = {
        "event_count": len(events),
        "spin_count": n_spin,
        "skid_count": len(events) - n_spin,
        "peak_slip_speed": float(np.nanmax(np.abs(slip))) if valid.any() else None,
        "slipping_share": time_share(t, mask_of_events(t, events), valid),
    }
    series = {
        f"{name}.{cat.RIM_SPEED}": v_rim,
        f"{name}.{cat.CONTACT_SPEED}": v_contact,
        f"{name}.{cat.SLIP_SPEED}": slip,
        f"{name}.{cat.SLIP_RATIO}": kappa,
    }
    return series, events, kpis


def _yaw_check(
    t: np.ndarray,
    rate_l: np.ndarray,
    rate_r: np.ndarray,
    gyro: np.ndarray,
    profile: RobotProfile,
    th: Thresholds,
) -> tuple[np.ndarray, list[Event], dict[str, Any]]:
    """Yaw rate from the wheels, yaw_slip events against the gyro, and KPIs."""
    yaw_wheels = yaw_rate_from_wheels(rate_l, rate_r, profile.wheel_radius, profile.track_width)
    diff = yaw_wheels - gyro
    intervals = find_intervals(
        t,
        np.abs(diff),
        th.yaw_rate_diff_on,
        th.yaw_rate_diff_off,
        min_duration_s=th.min_duration_s,
        merge_gap_s=th.merge_gap_s,
    )
    detail = {
        "signal": f"{cat.YAW_RATE_WHEELS} - {cat.YAW_RATE}",
        "unit": "rad/s",
        "yaw_rate_diff_on": th.yaw_rate_diff_on,
    }
    events = intervals_to_events(t, diff, intervals, cat.YAW_SLIP, None, detail=detail)
    w = sample_weights(t) * np.isfinite(diff)
    total = float(w.sum())
    rms = float(np.sqrt(np.nansum(w * diff * diff) / total)) if total > 0 else None
    kpis = {"event_count": len(events), "yaw_rate_diff_rms": rms}
    return yaw_wheels, events, kpis


def detect_slip(
    frame: pd.DataFrame, profile: RobotProfile, thresholds: Thresholds | None = None
) -> DetectorResult:
    """Find wheel spin and skid, and disagreement between wheel and gyro yaw rate.

    Parameters
    ----------
    frame : DataFrame
        Analysis frame: ``t`` [s], ``<wheel>.vel`` [rad/s], ``vel_x`` [m/s],
        ``yaw_rate`` and ``pitch_rate`` [rad/s]; optional ``pitch``, ``roll``
        [rad] and ``leg_l.length``, ``leg_r.length`` [m] for the lever arm.
    profile : RobotProfile
        Wheel radius, track width, encoder reference and wheel actuators.
    thresholds : Thresholds, optional
        Defaults to ``profile.thresholds``.

    Returns
    -------
    DetectorResult
        Events ``slip`` (channel = wheel actuator, peak = slip speed of largest
        magnitude [m/s], detail ``direction`` spin or skid) and ``yaw_slip``
        (channel None, peak = wheel minus gyro yaw rate [rad/s]); series
        ``<wheel>.rim_speed``, ``.contact_speed``, ``.slip_speed`` [m/s],
        ``.slip_ratio`` [-] and ``yaw_rate_wheels`` [rad/s]; KPIs per wheel
        (``event_count``, ``spin_count``, ``skid_count``, ``peak_slip_speed``
        [m/s], ``slipping_share`` [-]) and ``yaw_slip`` (``event_count``,
        ``yaw_rate_diff_rms`` [rad/s]).

    Notes
    -----
    ``v_rim = r (w_joint + pitch_rate)`` (leg-referenced encoder) or ``r
    w_joint``; ``v_contact = v_mid -/+ yaw_rate b / 2`` for left/right ([3]);
    slip speed ``v_rim - v_contact``; slip ratio per :func:`slip_ratio`. An
    event needs ``|kappa| > slip_ratio_on`` (held while above
    ``slip_ratio_off``) and ``|slip speed| > slip_speed_min``, the slip speed of
    the gate low-passed at :data:`GATE_CUTOFF_HZ` (zero phase): single-sample
    spikes of an encoder difference or a velocity estimate are no slip, while the
    ratio, the series and the peaks stay unfiltered. The lever-arm term of the
    contact speed comes from the gyro pitch rate (:func:`analysis.kinematics.lever_arm_rate`).
    """
    th = thresholds if thresholds is not None else profile.thresholds
    if cat.T not in frame.columns or len(frame) == 0:
        return DetectorResult(DETECTOR, skipped="the run has no samples (no t column or no rows)")
    leg_ref = profile.wheel_encoder_reference == "leg"
    reason = _missing_base(frame, leg_ref)
    if reason is not None:
        return DetectorResult(DETECTOR, skipped=reason)
    wheels = profile.wheels()
    rates = {
        side: column(frame, cat.actuator_signal(a.name, cat.VEL)) for side, a in wheels.items()
    }
    if all(x is None for x in rates.values()):
        names = " or ".join(cat.actuator_signal(a.name, cat.VEL) for a in wheels.values())
        return DetectorResult(
            DETECTOR, skipped=f"no {names}: map the wheel encoder velocities in the channel map"
        )

    t = frame[cat.T].to_numpy(dtype=float)
    vel_x = frame[cat.VEL_X].to_numpy(dtype=float, na_value=np.nan)
    yaw_rate = frame[cat.YAW_RATE].to_numpy(dtype=float, na_value=np.nan)
    pitch_rate = column(frame, cat.PITCH_RATE) if leg_ref else None
    result = DetectorResult(DETECTOR)
    L = _mean_leg_length(frame, result.notes)
    pitch, roll = column(frame, cat.PITCH), column(frame, cat.ROLL)
    if L is not None:
        for name, x in ((cat.PITCH, pitch), (cat.ROLL, roll)):
            if x is None:
                result.notes.append(
                    f"No {name}: its lever-arm term was left out of the contact speeds; "
                    f"map {name} to apply it."
                )
    gyro_pitch_rate = column(frame, cat.PITCH_RATE)
    if L is not None and pitch is not None and gyro_pitch_rate is None:
        result.notes.append(
            f"No {cat.PITCH_RATE}: the lever-arm term d/dt(L sin(pitch)) was taken from the "
            f"low-passed pitch estimate, which is noisier; map the gyro's pitch rate to use it."
        )
    v_mid = contact_midpoint_speed(
        t, vel_x, yaw_rate, profile.wheel_radius, L, pitch, roll, gyro_pitch_rate
    )
    v_contact = dict(
        zip(("l", "r"), contact_speeds(v_mid, yaw_rate, profile.track_width), strict=True)
    )

    series: dict[str, Any] = {cat.T: t}
    ground_rates: dict[str, np.ndarray] = {}
    for side, act in wheels.items():
        w = rates[side]
        if w is None:
            result.notes.append(
                f"No {cat.actuator_signal(act.name, cat.VEL)}: wheel {act.name} was not checked "
                f"for slip; map its encoder velocity in the channel map."
            )
            continue
        ground_rates[side] = w + pitch_rate if pitch_rate is not None else w
        v_rim = rim_speed(w, pitch_rate, profile.wheel_radius)
        s, events, kpis = _wheel_events(t, act.name, v_rim, v_contact[side], th)
        series.update(s)
        result.events.extend(events)
        result.kpis[act.name] = kpis

    if len(ground_rates) == 2:
        yaw_wheels, events, kpis = _yaw_check(
            t, ground_rates["l"], ground_rates["r"], yaw_rate, profile, th
        )
        series[cat.YAW_RATE_WHEELS] = yaw_wheels
        result.events.extend(events)
        result.kpis[cat.YAW_SLIP] = kpis
    else:
        result.notes.append(
            "The yaw-rate check (wheels against gyro) needs both wheel velocities; skipped."
        )
    result.series = pd.DataFrame(series)
    result.events.sort(key=lambda e: (e.start_s, e.kind, e.channel or ""))
    return result
