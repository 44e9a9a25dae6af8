"""Roll (lean) tracking: how well the roll follows its reference.

The error is ``e = roll_ref - roll``. The detector reports the error series,
the integral performance indices (IAE, ISE, ITAE), RMS and maximum error, the
share of logged time inside the tolerance band, the lag of the roll behind its
reference from the cross-correlation peak, and events where ``|e|`` leaves the
band for longer than the minimum duration. As an extra view it gives the lean
that would centre the ZMP, ``-atan(f_y / f_z)``, from the same heading-frame
specific force the tip-over detector uses, to draw against the reference.

References
----------
.. [1] R. C. Dorf and R. H. Bishop, Modern Control Systems, 13th ed.
   Pearson, 2017 (performance indices).
.. [2] S. Kajita et al., "Biped walking pattern generation by using preview
   control of zero-moment point," IEEE ICRA, 2003. doi:10.1109/ROBOT.2003.1241826
.. [3] V. Cossalter, Motorcycle Dynamics, 2nd ed. Lulu, 2006 (steady turning,
   roll angle).
"""

from __future__ import annotations

from collections.abc import Iterator
from contextlib import contextmanager
from contextvars import ContextVar

import numpy as np
import pandas as pd

from analysis import catalogue as cat
from analysis.catalogue import G0
from analysis.detect.tipover import F_Z_MIN, com_specific_force
from analysis.events import DetectorResult, find_intervals, intervals_to_events
from analysis.metrics import LagEstimate, iae, ise, itae, lag_by_xcorr, rms, time_where
from analysis.profile import RobotProfile, Thresholds

#: True while the roll lag is found for the whole run elsewhere (an analysis in time
#: chunks, :mod:`analysis.detect.chunk_lag`); the detector then leaves it out.
_LAG_ELSEWHERE: ContextVar[bool] = ContextVar("roll_lag_elsewhere", default=False)


@contextmanager
def roll_lag_elsewhere() -> Iterator[None]:
    """Within the block, :func:`detect_roll_tracking` leaves the lag out (no notes)."""
    token = _LAG_ELSEWHERE.set(True)
    try:
        yield
    finally:
        _LAG_ELSEWHERE.reset(token)


#: A roll_error event starts where |e| exceeds the band and ends where it falls
#: below this fraction of the band, so noise at the edge does not split one
#: excursion into many (common practice, no source). [-]
ROLL_EXIT_FRACTION = 0.8


def roll_error(roll_ref: np.ndarray, roll: np.ndarray) -> np.ndarray:
    """Roll tracking error.

    Parameters
    ----------
    roll_ref : ndarray
        Roll reference, positive right side down. [rad]
    roll : ndarray
        Measured roll, positive right side down. [rad]

    Returns
    -------
    ndarray
        ``e = roll_ref - roll`` ([1], tracking error). [rad]

    References
    ----------
    .. [1] R. C. Dorf and R. H. Bishop, Modern Control Systems, 13th ed. Pearson, 2017.
    """
    return np.asarray(roll_ref, dtype=float) - np.asarray(roll, dtype=float)


def steady_turn_lean(v: np.ndarray | float, R: np.ndarray | float) -> np.ndarray:
    """Roll angle that balances a steady turn (ZMP on the centre line).

    Parameters
    ----------
    v : ndarray or float
        Forward speed. [m/s]
    R : ndarray or float
        Turn radius, positive turning left (ISO 8855). [m]

    Returns
    -------
    ndarray
        Roll angle, positive right side down: negative (lean left) in a left
        turn. [rad]

    Notes
    -----
    ``tan(phi) = v^2 / (g R)`` in magnitude ([1], steady turning with
    zero-thickness tyres), leaning into the turn; ``g = G0``.

    References
    ----------
    .. [1] V. Cossalter, Motorcycle Dynamics, 2nd ed. Lulu, 2006.
    """
    v = np.asarray(v, dtype=float)
    R = np.asarray(R, dtype=float)
    return -np.arctan(v * v / (G0 * R))  # [1] steady-turn roll, sign per ISO 8855


def centring_lean(f_y: np.ndarray | float, f_z: np.ndarray | float) -> np.ndarray:
    """Roll angle that would put the ZMP on the centre line.

    Parameters
    ----------
    f_y, f_z : ndarray or float
        Heading-frame specific force of the CoM, left and up. [m/s²]

    Returns
    -------
    ndarray
        ``-atan(f_y / f_z)``, positive right side down; NaN where ``f_z < F_Z_MIN``. [rad]

    Notes
    -----
    Setting ``y_zmp = 0`` in :func:`zmp_lateral` gives ``tan(phi) = -f_y / f_z``
    ([1]); independent of ``L_c``.

    References
    ----------
    .. [1] S. Kajita et al., IEEE ICRA, 2003. doi:10.1109/ROBOT.2003.1241826
    """
    f_y = np.asarray(f_y, dtype=float)
    f_z = np.asarray(f_z, dtype=float)
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(f_z >= F_Z_MIN, -np.arctan(f_y / f_z), np.nan)


def detect_roll_tracking(
    frame: pd.DataFrame, profile: RobotProfile, thresholds: Thresholds | None = None
) -> DetectorResult:
    """Roll tracking error: series, out-of-band events and KPIs.

    Parameters
    ----------
    frame : DataFrame
        Column ``t`` [s] with ``roll`` and ``roll_ref`` [rad]; the accelerometer
        (or ``vel_x`` and ``yaw_rate``) for the ZMP-centring lean.
    profile : RobotProfile
        Supplies the default thresholds.
    thresholds : Thresholds, optional
        Defaults to ``profile.thresholds``; uses ``roll_band`` [rad],
        ``roll_lag_max_s`` [s], ``accel_cutoff`` [Hz], ``min_duration_s``,
        ``merge_gap_s`` [s].

    Returns
    -------
    DetectorResult
        ``detector="roll"``; series ``roll_error`` and (when a specific force is
        available) ``roll_zmp_lean``; events ``roll_error`` (channel None) with
        ``peak`` the signed error of largest magnitude; KPIs ``rms``,
        ``max_abs``, ``iae``, ``ise``, ``itae``, ``share_in_band``, ``lag_s``.

    Notes
    -----
    An event starts where ``|e| > roll_band`` and lasts while
    ``|e| > ROLL_EXIT_FRACTION * roll_band``. IAE, ISE, ITAE ([1]) and RMS are
    integrated over the logged time, skipping data gaps. The lag is positive
    when the roll follows its reference late (:func:`analysis.metrics.lag_by_xcorr`).
    """
    th = thresholds if thresholds is not None else profile.thresholds
    result = DetectorResult(detector="roll")
    missing = [
        n for n in (cat.ROLL_REF, cat.ROLL) if n not in frame.columns or not frame[n].notna().any()
    ]
    if missing:
        result.skipped = (
            f"No {' or '.join(missing)} logged: roll tracking compares the roll with the lean "
            f"controller's reference. Map the controller's roll reference to {cat.ROLL_REF} and "
            f"the IMU roll to {cat.ROLL} in the channel map."
        )
        return result
    t = frame[cat.T].to_numpy(dtype=float)
    ref = frame[cat.ROLL_REF].to_numpy(dtype=float)
    roll = frame[cat.ROLL].to_numpy(dtype=float)
    e = roll_error(ref, roll)
    series = {cat.T: t, cat.ROLL_ERROR: e}
    force = com_specific_force(frame, th)
    if isinstance(force, str):
        result.notes.append(f"No ZMP-centring lean series. {force}")
    else:
        series[cat.ROLL_ZMP_LEAN] = centring_lean(force.f_y, force.f_z)
        result.notes.append(f"ZMP-centring lean from the specific force ({force.method}).")
    result.series = pd.DataFrame(series)

    valid = np.isfinite(e)
    if not valid.any():
        result.notes.append(f"{cat.ROLL} and {cat.ROLL_REF} are never logged at the same time.")
        result.kpis = {"rms": None}
        return result
    band = float(th.roll_band)
    tv, ev = t[valid], e[valid]
    intervals = find_intervals(
        tv,
        np.abs(ev),
        band,
        ROLL_EXIT_FRACTION * band,
        min_duration_s=th.min_duration_s,
        merge_gap_s=th.merge_gap_s,
    )
    detail = {
        "signal": cat.ROLL_ERROR,
        "unit": "rad",
        "band": band,
        "exit": ROLL_EXIT_FRACTION * band,
    }
    result.events = intervals_to_events(
        tv, ev, intervals, cat.ROLL_ERROR, None, peak="absmax", detail=detail
    )
    _, in_band = time_where(t, np.abs(e) <= band, valid)
    if _LAG_ELSEWHERE.get():
        lag = LagEstimate(float("nan"), float("nan"), False, "")
    else:
        lag = lag_by_xcorr(t, ref, roll, th.roll_lag_max_s)
    if lag.reason:
        result.notes.append(f"Roll lag not estimated: {lag.reason}.")
    elif lag.at_bound:
        result.notes.append(
            f"The roll lag peaks at the search bound ({th.roll_lag_max_s:g} s): the true lag may "
            f"be larger; raise roll_lag_max_s to search further."
        )
    result.kpis = {
        "rms": rms(t, e),
        "max_abs": float(np.max(np.abs(ev))),
        "iae": iae(t, e),
        "ise": ise(t, e),
        "itae": itae(t, e),
        "share_in_band": in_band,
        "band": band,
        "lag_s": None if not np.isfinite(lag.lag_s) else lag.lag_s,
        "lag_correlation": None if not np.isfinite(lag.correlation) else lag.correlation,
        "lag_at_bound": lag.at_bound,
        "event_count": len(result.events),
    }
    return result
