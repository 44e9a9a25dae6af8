"""The run's path in the ground plane, dead reckoned from heading and speed.

A test engineer asks "where on the course did it happen"; logs of a balancing robot
rarely carry a position, but they carry a heading (the yaw estimate, or the gyro yaw
rate to integrate) and a forward speed (the velocity estimate, or the wheels). This
module integrates them into a path and places the run's samples and events on it.
The path drifts (heading bias, speed scale error): it is a sketch of where things
happened, not a survey.
"""

from __future__ import annotations

from collections.abc import Callable, Iterable
from dataclasses import dataclass

import numpy as np
import pandas as pd

from analysis import catalogue as cat
from analysis.kinematics import column, rim_speed
from analysis.profile import RobotProfile

#: Largest number of path points sent to a page. [-]
MAX_PATH_POINTS = 4000


@dataclass(frozen=True)
class DeadReckoning:
    """A dead-reckoned path, one point per sample of the frame.

    Attributes
    ----------
    t : ndarray
        Sample times. [s]
    x, y : ndarray
        Position in the ground plane, x along the first heading, y to its left
        (ISO 8855 axes at the start). [m]
    heading : ndarray
        Heading, positive turning left, unwrapped. [rad]
    distance : ndarray
        Distance travelled along the path (integral of |speed|). [m]
    heading_source, speed_source : str
        The signal each came from, for the page to say.
    """

    t: np.ndarray
    x: np.ndarray
    y: np.ndarray
    heading: np.ndarray
    distance: np.ndarray
    heading_source: str
    speed_source: str


def _cumtrapz(t: np.ndarray, y: np.ndarray) -> np.ndarray:
    """Cumulative trapezoid integral of ``y`` over ``t``, starting at 0 (NaN counts as 0)."""
    y = np.nan_to_num(np.asarray(y, dtype=float))
    out = np.zeros(len(t))
    if len(t) > 1:
        out[1:] = np.cumsum(0.5 * (y[1:] + y[:-1]) * np.diff(t))
    return out


def dead_reckon(
    t: np.ndarray,
    speed: np.ndarray,
    *,
    yaw: np.ndarray | None = None,
    yaw_rate: np.ndarray | None = None,
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Integrate heading and forward speed into a path in the ground plane.

    Parameters
    ----------
    t : ndarray
        Sample times, increasing. [s]
    speed : ndarray
        Forward speed, heading frame. [m/s]
    yaw : ndarray, optional
        Heading estimate, positive turning left; used when given (unwrapped). [rad]
    yaw_rate : ndarray, optional
        Gyro yaw rate, integrated when no ``yaw`` is given. [rad/s]

    Returns
    -------
    (x, y, heading, distance) : tuple of ndarray
        Position [m], heading [rad] and distance travelled [m] per sample.

    Notes
    -----
    Planar unicycle kinematics, ``x' = v cos(psi)``, ``y' = v sin(psi)``
    (e.g. Siegwart, Nourbakhsh & Scaramuzza, *Introduction to Autonomous Mobile
    Robots*, 2nd ed., MIT Press, 2011, Ch. 3), integrated with the trapezoid rule.
    Samples where a signal is NaN (a gap) contribute no motion.
    """
    t = np.asarray(t, dtype=float)
    v = np.asarray(speed, dtype=float)
    if yaw is not None:
        psi = np.asarray(yaw, dtype=float)
        finite = np.isfinite(psi)
        if not finite.any():
            raise ValueError("dead_reckon: the yaw estimate holds no finite value")
        psi = np.interp(t, t[finite], np.unwrap(psi[finite]))
        psi = psi - psi[0] if len(psi) else psi
    elif yaw_rate is not None:
        psi = _cumtrapz(t, yaw_rate)
    else:
        raise ValueError("dead_reckon needs yaw or yaw_rate")
    x = _cumtrapz(t, v * np.cos(psi))
    y = _cumtrapz(t, v * np.sin(psi))
    distance = _cumtrapz(t, np.abs(v))
    return x, y, psi, distance


def _heading_and_speed(
    frame: pd.DataFrame, profile: RobotProfile
) -> tuple[np.ndarray | None, np.ndarray | None, np.ndarray | None, str]:
    """The frame's yaw estimate, gyro yaw rate and forward speed (with its source)."""
    yaw = column(frame, cat.YAW)
    yaw_rate = column(frame, cat.YAW_RATE)
    speed = column(frame, cat.VEL_X)
    speed_source = cat.VEL_X
    if speed is None:
        wheels = profile.wheels()
        rates = [column(frame, cat.actuator_signal(a.name, cat.VEL)) for a in wheels.values()]
        if len(rates) == 2 and all(r is not None for r in rates):
            pitch_rate = column(frame, cat.PITCH_RATE)
            relative = profile.wheel_encoder_reference != "ground"
            mean_rate = 0.5 * (rates[0] + rates[1])  # type: ignore[operator]
            speed = rim_speed(mean_rate, pitch_rate if relative else None, profile.wheel_radius)
            speed_source = "wheels"
    return yaw, yaw_rate, speed, speed_source


def course_path(frame: pd.DataFrame, profile: RobotProfile) -> DeadReckoning | None:
    """Dead-reckon a run's frame: heading from ``yaw`` or the gyro, speed from ``vel_x`` or the wheels.

    Parameters
    ----------
    frame : DataFrame
        The run's frame (catalogue names, SI units, column ``t``).
    profile : RobotProfile
        Wheel radius and which way the wheel encoders are referenced.

    Returns
    -------
    DeadReckoning or None
        None when the frame has no heading (neither ``yaw`` nor ``yaw_rate``) or
        no speed (neither ``vel_x`` nor both wheel speeds).
    """
    t = frame[cat.T].to_numpy(dtype=float)
    yaw, yaw_rate, speed, speed_source = _heading_and_speed(frame, profile)
    if yaw is not None and not np.isfinite(yaw).any():
        yaw = None  # a mapped but empty estimate: integrate the gyro instead
    if speed is None or (yaw is None and yaw_rate is None) or len(t) < 2:
        return None
    heading_source = cat.YAW if yaw is not None else cat.YAW_RATE
    x, y, psi, dist = dead_reckon(t, speed, yaw=yaw, yaw_rate=None if yaw is not None else yaw_rate)
    return DeadReckoning(t, x, y, psi, dist, heading_source, speed_source)


def thin_indices(n: int, budget: int = MAX_PATH_POINTS) -> np.ndarray:
    """Evenly spaced sample indices, at most ``budget``, always with the first and last."""
    if n <= budget:
        return np.arange(n)
    return np.unique(np.linspace(0, n - 1, budget).round().astype(int))


@dataclass(frozen=True)
class ThinPath:
    """A dead-reckoned path kept at a few samples only (see :func:`course_path_chunks`).

    Attributes
    ----------
    t, x, y : ndarray
        Time [s] and position [m] at the kept samples.
    colour : ndarray or None
        The colour values of the kept samples, when the chunks carry them.
    event_x, event_y : ndarray
        Position at each asked time (the events' starts). [m]
    length_m : float
        Distance travelled over the whole run. [m]
    closure_m : float
        Distance from the last point back to the first. [m]
    heading_source, speed_source : str
    """

    t: np.ndarray
    x: np.ndarray
    y: np.ndarray
    colour: np.ndarray | None
    event_x: np.ndarray
    event_y: np.ndarray
    length_m: float
    closure_m: float
    heading_source: str
    speed_source: str


#: Rows of a yaw gap (yaw NaN) held back, waiting for the next finite yaw to interpolate
#: towards, at most; a longer gap is closed holding the last heading. [-]
MAX_HELD_ROWS = 1 << 22


class _Integral:
    """A running trapezoid integral fed in consecutive parts (NaN counts as 0)."""

    def __init__(self) -> None:
        self.t = self.f = self.value = float("nan")

    def feed(self, t: np.ndarray, f: np.ndarray) -> np.ndarray:
        f = np.nan_to_num(np.asarray(f, dtype=float))
        if not t.size:
            return np.zeros(0)
        if np.isnan(self.value):  # the first sample of the run: 0
            out = np.zeros(t.size)
            out[1:] = np.cumsum(0.5 * (f[1:] + f[:-1]) * np.diff(t))
        else:
            tt, ff = np.concatenate(([self.t], t)), np.concatenate(([self.f], f))
            out = self.value + np.cumsum(0.5 * (ff[1:] + ff[:-1]) * np.diff(tt))
        self.t, self.f, self.value = float(t[-1]), float(f[-1]), float(out[-1])
        return out


def course_path_chunks(
    chunks: Callable[[], Iterable[tuple[pd.DataFrame, np.ndarray | None]]],
    profile: RobotProfile,
    rows: int,
    at: np.ndarray,
    budget: int = MAX_PATH_POINTS,
) -> ThinPath | None:
    """:func:`course_path` of a run read in chunks, keeping only the samples drawn.

    Parameters
    ----------
    chunks : callable
        Each call yields the run's rows in consecutive frames, in time order, each
        with colour values on its rows (or None).
    profile : RobotProfile
    rows : int
        Rows of the whole run: the samples kept are ``thin_indices(rows, budget)``.
        When the chunks hold another count, the pass is made again with theirs.
    at : ndarray
        Times at which to place points on the path (the events' starts). [s]

    Returns
    -------
    ThinPath or None
        None where :func:`course_path` gives None. The same path as
        :func:`course_path` (running sums in parts: equal to rounding), in memory
        that does not grow with the run: a yaw gap is interpolated across chunks
        as in one pass, up to :data:`MAX_HELD_ROWS` rows held back.
    """
    use_yaw = True
    for _ in range(3):  # again with the gyro if the yaw estimate is empty; with the true count
        out = _dead_reckon_chunks(
            chunks, profile, rows, np.asarray(at, dtype=float), budget, use_yaw
        )
        if out is None:
            return None
        if out == "no yaw":
            use_yaw = False
            continue
        if isinstance(out, int):
            rows = out
            continue
        return out  # type: ignore[return-value]
    raise AssertionError("the run's chunks changed between passes")


def _dead_reckon_chunks(
    chunks: Callable[[], Iterable[tuple[pd.DataFrame, np.ndarray | None]]],
    profile: RobotProfile,
    rows: int,
    at: np.ndarray,
    budget: int,
    use_yaw: bool,
) -> ThinPath | str | int | None:
    keep = thin_indices(rows, budget)
    order = np.argsort(at, kind="stable")
    at_sorted = at[order]
    ev_x, ev_y = np.zeros(at.size), np.zeros(at.size)
    placed = 0  # events placed so far (in time order)
    kept: dict[str, list[np.ndarray]] = {"t": [], "x": [], "y": [], "c": []}
    x_int, y_int, d_int, psi_int = _Integral(), _Integral(), _Integral(), _Integral()
    # yaw: the last finite sample (time, unwrapped, raw), the first unwrapped, rows held
    anchor: tuple[float, float, float] | None = None
    psi0 = float("nan")
    held: list[tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray | None]] = []
    held_rows = 0
    done = 0  # rows integrated so far
    prev: tuple[float, float, float] | None = None  # last integrated (t, x, y)
    sources: tuple[str, str] | None = None
    has_colour = False

    def integrate(t: np.ndarray, psi: np.ndarray, v: np.ndarray, c: np.ndarray | None) -> None:
        nonlocal done, placed, prev
        x = x_int.feed(t, v * np.cos(psi))
        y = y_int.feed(t, v * np.sin(psi))
        d_int.feed(t, np.abs(v))
        lo, hi = np.searchsorted(keep, [done, done + t.size])
        pick = keep[lo:hi] - done
        kept["t"].append(t[pick])
        kept["x"].append(x[pick])
        kept["y"].append(y[pick])
        if c is not None:
            kept["c"].append(np.asarray(c, dtype=float)[pick])
        # events up to this part's last sample: between the previous part's last
        # sample and this part's samples, as np.interp over the whole path
        tt = t if prev is None else np.concatenate(([prev[0]], t))
        xx = x if prev is None else np.concatenate(([prev[1]], x))
        yy = y if prev is None else np.concatenate(([prev[2]], y))
        upto = int(np.searchsorted(at_sorted, tt[-1], side="right"))
        if upto > placed:
            when = at_sorted[placed:upto]
            ev_x[order[placed:upto]] = np.interp(when, tt, xx)
            ev_y[order[placed:upto]] = np.interp(when, tt, yy)
            placed = upto
        prev = (float(t[-1]), float(x[-1]), float(y[-1]))
        done += t.size

    def heading(t: np.ndarray, yaw: np.ndarray) -> np.ndarray:
        """Unwrapped yaw on ``t`` (ending with a finite yaw, or the run's end)."""
        nonlocal anchor, psi0
        ok = np.isfinite(yaw)
        tf, raw = t[ok], yaw[ok]
        if anchor is None:
            uf = np.unwrap(raw)
            psi0 = float(uf[0])
            tx, ux = tf, uf
        else:
            a_t, a_u, a_raw = anchor
            uf = np.unwrap(np.concatenate(([a_raw], raw)))[1:] + (a_u - a_raw)
            tx, ux = np.concatenate(([a_t], tf)), np.concatenate(([a_u], uf))
        if tf.size:
            anchor = (float(tf[-1]), float(uf[-1]), float(raw[-1]))
        return np.interp(t, tx, ux) - psi0

    def flush(final: bool) -> None:
        """Integrate the held rows (all when ``final``), up to their last finite yaw."""
        nonlocal held, held_rows
        if not held:
            return
        t = np.concatenate([h[0] for h in held])
        yaw = np.concatenate([h[1] for h in held])
        v = np.concatenate([h[2] for h in held])
        c = np.concatenate([h[3] for h in held]) if has_colour else None
        ok = np.flatnonzero(np.isfinite(yaw))
        cut = t.size if final or held_rows > MAX_HELD_ROWS else (int(ok[-1]) + 1 if ok.size else 0)
        if anchor is None and not ok.size:
            # before the first finite yaw the heading is the first one: 0 from the start
            integrate(t, np.zeros(t.size), v, c)
            held, held_rows = [], 0
            return
        if cut:
            integrate(t[:cut], heading(t[:cut], yaw[:cut]), v[:cut], None if c is None else c[:cut])
        rest = (t[cut:], yaw[cut:], v[cut:], None if c is None else c[cut:])
        held = [rest] if rest[0].size else []
        held_rows = int(rest[0].size)

    for frame, colour in chunks():
        yaw, yaw_rate, speed, speed_source = _heading_and_speed(frame, profile)
        if sources is None:
            if speed is None or (yaw is None and yaw_rate is None):
                return None
            if yaw is None:
                use_yaw = False
            if not use_yaw and yaw_rate is None:
                return None
            sources = (cat.YAW if use_yaw else cat.YAW_RATE, speed_source)
            has_colour = colour is not None
        t = frame[cat.T].to_numpy(dtype=float)
        if not t.size or speed is None:
            continue
        c = None if not has_colour or colour is None else np.asarray(colour, dtype=float)
        if has_colour and (c is None or c.size != t.size):
            c = np.full(t.size, np.nan)  # the colour series does not cover these rows
        if use_yaw:
            held.append((t, yaw, speed, c))  # type: ignore[arg-type]
            held_rows += t.size
            flush(False)
        else:
            integrate(t, psi_int.feed(t, yaw_rate), speed, c)  # type: ignore[arg-type]
    if sources is None:
        return None
    if use_yaw:
        if anchor is None:
            return "no yaw"  # a mapped but empty estimate: integrate the gyro instead
        flush(True)
    if done != rows:
        return done
    if done < 2:
        return None
    ev_x[order[placed:]] = prev[1] if prev else 0.0  # after the last sample: held
    ev_y[order[placed:]] = prev[2] if prev else 0.0
    tk, xk, yk = (np.concatenate(kept[k]) for k in ("t", "x", "y"))
    return ThinPath(
        t=tk,
        x=xk,
        y=yk,
        colour=np.concatenate(kept["c"]) if has_colour else None,
        event_x=ev_x,
        event_y=ev_y,
        length_m=d_int.value,
        closure_m=float(np.hypot(xk[-1] - xk[0], yk[-1] - yk[0])),
        heading_source=sources[0],
        speed_source=sources[1],
    )
