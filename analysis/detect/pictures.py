"""What the course map, actuator envelope and calibration panels draw, for one stored run.

Each function reads a stored run (the frame columns and derived series it draws,
never the whole run: an eight-hour run's frame is gigabytes; events, profile) in
windows of :data:`WINDOW_ROWS` rows, feeds them to the chunked computation of
:mod:`analysis.detect.course_map`, :mod:`analysis.detect.envelope` or
:mod:`analysis.detect.calibrate` (memory does not grow with the run's length), and
returns plain JSON-ready data: values a person reads in display units
(:mod:`analysis.display`: angles in deg, rates in deg/s, shares in %), each with its
unit.
"""

from __future__ import annotations

import math
from collections.abc import Iterator
from typing import Any

import numpy as np
import pandas as pd

from analysis import catalogue as cat
from analysis.archive.files import RowGroupCache
from analysis.archive.store import Archive, Window
from analysis.detect.calibrate import calibrate_chunks
from analysis.detect.course_map import course_path_chunks
from analysis.detect.envelope import actuator_envelope_chunks
from analysis.display import display_unit
from analysis.errors import OutriggerError, RunNotFoundError
from analysis.profile import RobotProfile

#: Series a course map can be coloured by: key -> (label, SI unit).
MAP_COLOURS: dict[str, tuple[str, str]] = {
    "tip_margin": ("Tip-over margin", ""),
    "roll_error": ("Roll error", "rad"),
    "slip_speed": ("Slip speed, larger wheel", "m/s"),
    "speed": ("Forward speed", "m/s"),
}


#: Rows of the run's base stream read at once (about 11 minutes at 400 Hz; a window
#: rounds to whole row groups when the cuts come from the file's footer). The
#: pictures of an eight-hour run then peak at 0.35 to 0.65 GiB, against 0.45 to 0.9
#: with 2**20 rows and 2.2 to 3.4 GiB whole (benchmarks/bench_dashboard.py). [-]
WINDOW_ROWS = 1 << 18

#: Time read beyond a window's ends in the derived series, so that a colour on another
#: time base is interpolated between the same samples as over the whole run. [s]
SERIES_MARGIN_S = 1.0


#: Most bytes of columns the envelope holds between its two passes instead of reading
#: the run again. [B]
HOLD_BYTES = 1 << 28


class PictureError(OutriggerError):
    """A picture was asked for with a choice that does not exist."""

    status = 400


def _frames(
    archive: Archive, run_id: str, columns: list[str], windows: list[Window]
) -> Iterator[tuple[Window, pd.DataFrame]]:
    """The run's frame with ``columns``, window after window (one row group cache)."""
    cache = RowGroupCache()
    for lo, hi in windows:
        yield (lo, hi), archive.load_frame(run_id, columns=columns, t0=lo, t1=hi, cache=cache)


def _finite_list(values: np.ndarray, digits: int = 6) -> list[float | None]:
    """JSON list with None for NaN, rounded to ``digits`` significant digits."""
    out: list[float | None] = []
    for v in values.tolist():
        if v is None or not math.isfinite(v):
            out.append(None)
        else:
            out.append(float(f"{v:.{digits}g}"))
    return out


def _course_columns(profile: RobotProfile) -> list[str]:
    """The frame columns :func:`course_path` reads (heading, speed, wheel speeds)."""
    wheels = [cat.actuator_signal(a.name, cat.VEL) for a in profile.wheels().values()]
    return [cat.YAW, cat.YAW_RATE, cat.VEL_X, cat.PITCH_RATE, *wheels]


def _calibration_columns(profile: RobotProfile) -> list[str]:
    """The frame columns :func:`calibrate` reads."""
    wheels = [cat.actuator_signal(a.name, cat.VEL) for a in profile.wheels().values()]
    rates = [cat.YAW_RATE, cat.PITCH_RATE, cat.ROLL_RATE, cat.VEL_X]
    return [*rates, *wheels, cat.ACCEL_X, cat.ACCEL_Y, cat.ACCEL_Z, cat.PITCH, cat.ROLL]


def _series_names(archive: Archive, run_id: str, colour: str) -> list[str] | None:
    """The derived series a colour is made of (None: the run was not analysed)."""
    try:
        names = archive.series_columns(run_id)
    except RunNotFoundError:
        return None
    if colour == "slip_speed":
        return [c for c in names if c.endswith("." + cat.SLIP_SPEED)]
    return [colour] if colour in names else []


def _colour_values(
    archive: Archive,
    run_id: str,
    colour: str,
    wanted: list[str] | None,
    window: Window,
    frame: pd.DataFrame,
    cache: RowGroupCache,
) -> np.ndarray | None:
    """The colour series on the frame's rows (of one window), or None."""
    if colour == "speed":
        return frame[cat.VEL_X].to_numpy(dtype=float) if cat.VEL_X in frame else None
    if not wanted:
        return None
    lo, hi = window
    series = archive.read_result_series(
        run_id,
        wanted,
        None if lo is None else lo - SERIES_MARGIN_S,
        None if hi is None else hi + SERIES_MARGIN_S,
        cache=cache,
    )
    if colour == "slip_speed":
        vals = series[wanted].to_numpy(dtype=float)
        with np.errstate(all="ignore"):
            idx = np.nanargmax(np.where(np.isnan(vals), -np.inf, np.abs(vals)), axis=1)
        picked = vals[np.arange(len(vals)), idx]
    else:
        picked = series[colour].to_numpy(dtype=float)
    st = series[cat.T].to_numpy(dtype=float)
    frame_t = frame[cat.T].to_numpy(dtype=float)
    if not st.size:
        return np.full(frame_t.size, np.nan)
    # the series' own samples where the time bases agree (interp at a sample is exact)
    return np.interp(frame_t, st, picked, left=np.nan, right=np.nan)


def course_map(archive: Archive, run_id: str, colour: str = "tip_margin") -> dict[str, Any]:
    """The dead-reckoned path of a run, coloured by a series, with the run's events on it.

    Returns
    -------
    dict
        ``available`` False (with ``reason``) when the run has no heading or speed;
        else ``x``, ``y`` [m], ``t`` [s], ``value`` (the colour series in
        ``value_unit``), ``events`` (kind, channel, start_s, x, y), ``length_m``,
        ``closure_m`` (distance from end to start) and the sources used.
    """
    if colour not in MAP_COLOURS:
        raise PictureError(
            f"Unknown colour series {colour!r} for the course map; choose one of "
            f"{', '.join(MAP_COLOURS)}."
        )
    profile = archive.load_profile(run_id)
    label, si_unit = MAP_COLOURS[colour]
    stored = archive.read_results(run_id)
    ev = stored[0] if stored is not None else None
    starts = np.zeros(0) if ev is None else ev["start_s"].to_numpy(dtype=float)
    wanted = None if colour == "speed" else _series_names(archive, run_id, colour)
    windows, rows = archive.windows(run_id, WINDOW_ROWS)
    columns = _course_columns(profile)

    def chunks() -> Iterator[tuple[pd.DataFrame, np.ndarray | None]]:
        cache = RowGroupCache()  # the series' row groups, decoded once as the windows move on
        for window, frame in _frames(archive, run_id, columns, windows):
            yield frame, _colour_values(archive, run_id, colour, wanted, window, frame, cache)

    path = course_path_chunks(chunks, profile, rows, starts)
    if path is None:
        return {
            "available": False,
            "reason": "The run has no heading (yaw or yaw_rate) or no forward speed "
            "(vel_x or both wheel speeds) to dead-reckon a path from.",
        }
    unit, factor = display_unit(si_unit)
    if si_unit == "" and colour == "tip_margin":
        unit, factor = "", 1.0
    shown = None if path.colour is None else path.colour * factor
    events = []
    if ev is not None:
        for kind, channel, start, x, y in zip(
            ev["kind"].astype(str),
            [c if isinstance(c, str) else None for c in ev["channel"].tolist()],  # NaN: none
            starts.tolist(),
            path.event_x.tolist(),
            path.event_y.tolist(),
            strict=True,
        ):
            events.append({"kind": kind, "channel": channel, "start_s": start, "x": x, "y": y})
    return {
        "available": True,
        "t": _finite_list(path.t),
        "x": _finite_list(path.x),
        "y": _finite_list(path.y),
        "value": None if shown is None else _finite_list(shown, 4),
        "colour": colour,
        "value_label": label,
        "value_unit": unit,
        "colours": {k: v[0] for k, v in MAP_COLOURS.items()},
        "events": events,
        "length_m": path.length_m,
        "closure_m": path.closure_m,
        "heading_source": path.heading_source,
        "speed_source": path.speed_source,
        "note": "Dead-reckoned from heading and speed: the path drifts over a run; "
        "it shows where things happened, not a surveyed position.",
    }


def envelope(
    archive: Archive,
    run_id: str,
    actuator: str | None = None,
    t0: float | None = None,
    t1: float | None = None,
) -> dict[str, Any]:
    """The operating envelope of one actuator (the first wheel when None) over a window.

    Returns
    -------
    dict
        Speeds in rad/s, torques in N*m (their display units are the same); the
        density ``share`` in % of the window's time per cell; limit lines;
        saturated points; the list of ``actuators`` to choose from.
    """
    profile = archive.load_profile(run_id)
    names = list(profile.actuator_names)
    if actuator is None:
        wheels = profile.wheels()
        actuator = next(iter(wheels.values())).name if wheels else names[0]
    if actuator not in names:
        raise PictureError(
            f"Unknown actuator {actuator!r}; this run's actuators: {', '.join(names)}."
        )
    act = profile.actuator(actuator)
    cols = [
        cat.T,
        *(
            cat.actuator_signal(actuator, q)
            for q in (cat.VEL, cat.TORQUE, cat.TORQUE_CMD, cat.TORQUE_REQ)
        ),
    ]
    name = f"{actuator}.{cat.SATURATED}"
    try:
        flagged = name in archive.series_columns(run_id)
    except RunNotFoundError:
        flagged = False
    windows, rows = archive.windows(run_id, WINDOW_ROWS, t0, t1)
    # The envelope passes over the rows twice; a run whose columns are small is held
    # from the first pass (a one-hour run: 46 MB), a longer one read again.
    held: list[tuple[pd.DataFrame, np.ndarray | None]] | None = (
        [] if rows * len(cols) * 8 <= HOLD_BYTES else None
    )
    complete = False

    def chunks() -> Iterator[tuple[pd.DataFrame, np.ndarray | None]]:
        nonlocal complete
        if complete and held is not None:
            yield from held
            return
        cache = RowGroupCache()  # the series' row groups, decoded once as the windows move on
        for (lo, hi), frame in _frames(archive, run_id, cols[1:], windows):
            saturated = None
            if flagged:  # the flags only where they lie on the frame's own rows
                series = archive.read_result_series(run_id, [name], lo, hi, cache=cache)
                if len(series) == len(frame):
                    saturated = series[name].to_numpy(dtype=bool)
            if held is not None:
                held.append((frame, saturated))
            yield frame, saturated
        complete = True

    env = actuator_envelope_chunks(chunks, act)
    if env is None:
        return {
            "available": False,
            "actuators": names,
            "actuator": actuator,
            "reason": f"The run logs no joint speed or no torque for {actuator}.",
        }
    lines = env["lines"]
    return {
        "available": True,
        "actuators": names,
        "actuator": actuator,
        "torque_source": env["torque_source"],
        "samples": env["samples"],
        "share_pct": _finite_list(env["share"].T.ravel() * 100.0, 4),
        "n_speed": len(env["speed_edges"]) - 1,
        "n_torque": len(env["torque_edges"]) - 1,
        "speed_edges": _finite_list(env["speed_edges"]),
        "torque_edges": _finite_list(env["torque_edges"]),
        "speed_unit": "rad/s",
        "torque_unit": "N·m",
        "lines": {
            "speed": _finite_list(lines["speed"]),
            "peak": lines["peak"],
            "continuous": lines["continuous"],
            "motor": lines["motor"],
            "upper": _finite_list(lines["upper"]) if "upper" in lines else None,
            "lower": _finite_list(lines["lower"]) if "lower" in lines else None,
        },
        "saturated_points": env["saturated_points"],
        "peak_abs_torque": env["peak_abs_torque"],
        "share_above_continuous_pct": None
        if env["share_above_continuous"] is None
        else round(100.0 * env["share_above_continuous"], 3),
        "t0": t0,
        "t1": t1,
    }


def calibration(archive: Archive, run_id: str) -> dict[str, Any]:
    """The calibration check of a run against its stored profile, in display units."""
    profile = archive.load_profile(run_id)
    windows, _ = archive.windows(run_id, WINDOW_ROWS)
    columns = _calibration_columns(profile)
    result = calibrate_chunks((f for _, f in _frames(archive, run_id, columns, windows)), profile)
    rows = []
    for e in result.estimates:
        unit, factor = display_unit(e.unit)
        tol = e.tolerance * (100.0 if e.tolerance_kind == "relative" else factor)
        rows.append(
            {
                "key": e.key,
                "label": e.label,
                "unit": unit,
                "estimate": None if e.estimate is None else e.estimate * factor,
                "profile": None if e.profile is None else e.profile * factor,
                "samples": e.samples,
                "tolerance": tol,
                "tolerance_unit": "%" if e.tolerance_kind == "relative" else unit,
                "differs": e.differs,
                "note": e.note,
            }
        )
    return {
        "profile": profile.name,
        "estimates": rows,
        "corrected_profile": result.corrected_profile(),
        "si": result.to_dict(),
    }
