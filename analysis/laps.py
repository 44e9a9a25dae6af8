"""Laps of a run on a closed loop, from the repeating course shape.

A closed test loop driven many times gives a curvature trace (heading rate per
metre against distance, :func:`analysis.course_shape.course_trace`) that repeats
once per lap. The lap length is the lag of the first strong peak of the trace's
normalised autocorrelation; one whole lap of the trace is then the template,
and every lap boundary is the peak of the template's normalised
cross-correlation with the trace searched near where the previous boundary
predicts it ([1], Section 11.4). Each boundary is found on its own, so an
odometry scale error of a fraction of a percent moves a boundary by that
fraction of one lap, never by the sum over the run.

The start line is by default where the run starts (a robot set down at the
start gate), or a distance from the run's start given by the user (a start
line stored for the course). Driving before the first crossing of the start
line is a partial first lap; a run that ends before the next crossing has a
partial last lap.

References
----------
.. [1] J. S. Bendat and A. G. Piersol, Random Data: Analysis and Measurement
   Procedures, 4th ed. Wiley, 2010. Section 11.4 (cross-correlation estimates).
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd
from scipy.signal import find_peaks

from analysis import catalogue as cat
from analysis.course_shape import CourseTrace, course_trace, normalised_xcorr
from analysis.errors import CompareError
from analysis.profile import RobotProfile

#: Shortest lap looked for. [m] (common practice, no source: a loop shorter than
#: this is a manoeuvre, not a test course)
MIN_LAP_M = 10.0
#: Least normalised correlation for a repeat of the course shape (as the
#: same-course check of the alignment). [-] (common practice, no source)
MIN_LAP_CORRELATION = 0.6
#: Of the autocorrelation peaks, the first one at least this share of the
#: highest is the lap (later peaks are two, three... laps). [-]
#: (common practice, no source)
PEAK_SHARE = 0.9
#: Each boundary is searched within this share of a lap around its prediction. [-]
#: (common practice, no source: odometry scale errors are well below 1 %, speed
#: does not enter a distance trace)
SEARCH_SHARE = 0.15
#: A match at the end of the trace needs at least this share of the template. [-]
MIN_OVERLAP_SHARE = 0.5
#: Largest RMS difference of a lap's curvature from the template, relative to the
#: template's RMS curvature. [-] (common practice, no source: laps driven on one line
#: repeat their curvature within a few percent; a course whose two halves merely look
#: alike, with curves of other radii, differs by half or more)
MAX_LAP_RESIDUAL = 0.3
#: A first boundary closer than this to the run's start is the start itself. [m]
#: (common practice, no source: twice the curvature smoothing width)
START_SNAP_M = 2.0


@dataclass(frozen=True)
class Lap:
    """One lap of a run.

    Attributes
    ----------
    number : int
        1, 2, ... in driving order (a partial first lap is number 1).
    start_s, end_s : float
        Times of the start and end crossings (run time). [s]
    start_m, end_m : float
        Run distance at the crossings. [m]
    partial : bool
        Driving before the first or after the last crossing of the start line.
    match : float
        Normalised correlation of the lap's start with the template; NaN at a
        run's own start or end. [-]
    """

    number: int
    start_s: float
    end_s: float
    start_m: float
    end_m: float
    partial: bool
    match: float = float("nan")

    @property
    def length_m(self) -> float:
        """Distance driven in the lap. [m]"""
        return self.end_m - self.start_m

    @property
    def duration_s(self) -> float:
        """Time the lap took. [s]"""
        return self.end_s - self.start_s

    def to_dict(self) -> dict[str, Any]:
        """JSON shape."""
        return {
            "number": self.number,
            "start_s": round(self.start_s, 4),
            "end_s": round(self.end_s, 4),
            "start_m": round(self.start_m, 3),
            "end_m": round(self.end_m, 3),
            "length_m": round(self.length_m, 3),
            "duration_s": round(self.duration_s, 4),
            "partial": self.partial,
            "match": None if not np.isfinite(self.match) else round(float(self.match), 4),
        }


@dataclass
class LapSet:
    """The laps of one run and how they were found.

    Attributes
    ----------
    laps : list of Lap
        In driving order; empty when the run is not laps of one loop.
    lap_length_m : float
        Median length of the complete laps (NaN without laps). [m]
    method : str
        ``curvature`` (start line at the run's start) or ``start line``.
    reason : str
        Plain sentence: what was found, or why no laps were.
    template_start_m : float
        Run distance where the template lap starts (NaN without laps). [m]
    template : ndarray
        Curvature of the template lap on the trace grid. [rad/m]
    grid_m : float
        Spacing of that grid. [m]
    """

    laps: list[Lap]
    lap_length_m: float
    method: str
    reason: str
    template_start_m: float = float("nan")
    template: np.ndarray = field(default_factory=lambda: np.zeros(0), repr=False)
    grid_m: float = 0.05

    @property
    def complete(self) -> list[Lap]:
        """The laps that are not partial."""
        return [lap for lap in self.laps if not lap.partial]

    def to_dict(self) -> dict[str, Any]:
        """JSON shape (stored with the analysis)."""
        return {
            "laps": [lap.to_dict() for lap in self.laps],
            "n_complete": len(self.complete),
            "lap_length_m": None
            if not np.isfinite(self.lap_length_m)
            else round(float(self.lap_length_m), 3),
            "method": self.method,
            "reason": self.reason,
        }


def estimate_lap_length(trace: CourseTrace, min_lap_m: float = MIN_LAP_M) -> tuple[float, float]:
    """Lap length of a repeating curvature trace from its autocorrelation.

    Parameters
    ----------
    trace : CourseTrace
        Curvature on a uniform distance grid.
    min_lap_m : float
        Shortest lap looked for. [m]

    Returns
    -------
    lap_length_m : float
        Lag of the first autocorrelation peak within :data:`PEAK_SHARE` of the
        highest, refined by a parabola through the peak; NaN if none. [m]
    correlation : float
        Normalised correlation at that lag (the best found when NaN). [-]

    Notes
    -----
    The normalised autocorrelation is the Pearson correlation of the trace
    with itself shifted by each lag, over the overlap only ([1] Section 11.4).
    The trace must hold at least two laps.
    """
    k = trace.curvature
    if k.size < 8:
        return float("nan"), float("nan")
    dx = float(trace.grid[1] - trace.grid[0])
    lags, r = normalised_xcorr(k, k, min_overlap=max(3, k.size // 2))
    pos = lags > 0
    lags, r = lags[pos], r[pos]
    r = np.where(lags * dx >= min_lap_m, r, np.nan)
    if not np.isfinite(r).any():
        return float("nan"), float("nan")
    filled = np.nan_to_num(r, nan=-1.0)
    peaks, _ = find_peaks(filled, height=MIN_LAP_CORRELATION)
    best = float(np.nanmax(r))
    if peaks.size == 0:
        return float("nan"), best
    top = filled[peaks].max()
    i = int(peaks[np.flatnonzero(filled[peaks] >= PEAK_SHARE * top)[0]])
    return (float(lags[i]) + _refine(filled, i) - i) * dx, float(r[i])


def _refine(r: np.ndarray, i: int) -> float:
    """Index of a peak refined by a parabola through it and its neighbours."""
    x = float(i)
    if 0 < i < r.size - 1:
        den = r[i - 1] - 2.0 * r[i] + r[i + 1]
        if den < 0:
            # Parabola through the peak and its neighbours (common practice, no source).
            x += 0.5 * (r[i - 1] - r[i + 1]) / den
    return x


def _match_curve(trace: CourseTrace, template: np.ndarray) -> np.ndarray:
    """Correlation of the template starting at each grid point of the trace.

    ``out[g]`` is the Pearson correlation of ``template`` with
    ``trace.curvature[g : g + len(template)]`` over their overlap (NaN where the
    overlap is below :data:`MIN_OVERLAP_SHARE` of the template).
    """
    k = trace.curvature
    lags, r = normalised_xcorr(
        template, k, min_overlap=max(3, int(MIN_OVERLAP_SHARE * template.size))
    )
    out = np.full(k.size, np.nan)
    sel = (lags >= 0) & (lags < k.size)
    out[lags[sel]] = r[sel]
    return out


def _best_near(match: np.ndarray, centre: float, half: float) -> tuple[float, float]:
    """Refined grid position and value of the best match within ``centre +- half``."""
    lo = max(0, int(np.floor(centre - half)))
    hi = min(match.size, int(np.ceil(centre + half)) + 1)
    if hi - lo < 1:
        return float("nan"), float("nan")
    part = match[lo:hi]
    if not np.isfinite(part).any():
        return float("nan"), float("nan")
    j = lo + int(np.nanargmax(part))
    filled = np.nan_to_num(match, nan=-1.0)
    return _refine(filled, j), float(match[j])


def _median_residual(trace: CourseTrace, template: np.ndarray, starts_g: list[float]) -> float:
    """Median over laps of RMS(lap curvature - template) / RMS(template). [-]"""
    scale = float(np.sqrt(np.mean(template**2))) if template.size else 0.0
    if not starts_g or scale == 0.0:
        return float("inf") if starts_g else 0.0
    out = []
    for g in starts_g:
        part = trace.curvature[int(round(g)) : int(round(g)) + template.size]
        m = part.size
        if m:
            out.append(float(np.sqrt(np.mean((part - template[:m]) ** 2))) / scale)
    return float(np.median(out)) if out else 0.0


def _matches_start(trace: CourseTrace, template: np.ndarray, g: float) -> bool:
    """Whether the trace from grid point ``g`` on looks like the template's start."""
    part = trace.curvature[int(round(g)) : int(round(g)) + template.size]
    m = min(part.size, template.size)
    if m < 3 or np.std(part[:m]) == 0 or np.std(template[:m]) == 0:
        return False
    return bool(np.corrcoef(part[:m], template[:m])[0, 1] >= MIN_LAP_CORRELATION)


def _time_at(trace: CourseTrace, t: np.ndarray, distance_m: np.ndarray) -> np.ndarray:
    """Time the run first reached each distance. [s]"""
    s = trace.distance
    _, first = np.unique(s, return_index=True)
    return np.interp(distance_m, s[first], t[first])


def _boundaries(
    match: np.ndarray, anchor: float, lap_g: float, n_grid: int
) -> tuple[list[float], list[float]]:
    """Boundaries (grid units) found forward and backward from an anchor boundary."""
    half = SEARCH_SHARE * lap_g
    bounds, matches = [anchor], [float(match[int(round(anchor))]) if 0 <= anchor < n_grid else 1.0]
    prev, step = anchor, lap_g
    while prev + step - half < n_grid:
        b, m = _best_near(match, prev + step, half)
        if not (np.isfinite(b) and m >= MIN_LAP_CORRELATION):
            break
        step = b - prev if abs(b - prev - lap_g) < half else lap_g
        bounds.append(b)
        matches.append(m)
        prev = b
    prev, step = anchor, lap_g
    while prev - step + half >= 0:
        b, m = _best_near(match, prev - step, half)
        if (
            not (np.isfinite(b) and m >= MIN_LAP_CORRELATION)
            or b >= prev - (1 - SEARCH_SHARE) * lap_g
        ):
            break
        bounds.insert(0, b)
        matches.insert(0, m)
        prev = b
    return bounds, matches


def laps_from_trace(
    trace: CourseTrace,
    t: np.ndarray,
    *,
    start_m: float | None = None,
    lap_length_m: float | None = None,
    template: np.ndarray | None = None,
) -> LapSet:
    """Find the laps of a run from its curvature trace.

    Parameters
    ----------
    trace : CourseTrace
        The run's curvature on a uniform distance grid.
    t : ndarray
        Time of each run sample (the trace's ``distance`` is per sample). [s]
    start_m : float, optional
        Start line as a distance from the run's start. [m] Default: the first
        crossing is found from the course shape, at the run's start when the
        run starts on the loop.
    lap_length_m : float, optional
        Known lap length (default: from the autocorrelation). [m]
    template : ndarray, optional
        Curvature of one lap from another run (grid spacing of ``trace``) whose
        start is the start line: then this run's boundaries fall at the same
        places on the course as that run's. [rad/m]

    Returns
    -------
    LapSet
    """
    n = trace.grid.size
    dx = float(trace.grid[1] - trace.grid[0]) if n > 1 else 0.05
    total = trace.length_m
    if template is not None:
        lap = template.size * dx
    elif lap_length_m is not None:
        lap = float(lap_length_m)
    else:
        lap, corr = estimate_lap_length(trace)
        if not np.isfinite(lap):
            what = "" if not np.isfinite(corr) else f" (best repeat correlates {corr:.2f})"
            return LapSet(
                [], float("nan"), "curvature",
                f"No laps: the course shape does not repeat within the run's {total:.0f} m"
                f"{what}; lap detection needs at least two laps of one closed loop.",
                grid_m=dx,
            )  # fmt: skip
    if not (np.isfinite(lap) and lap >= MIN_LAP_M) or total < lap:
        return LapSet(
            [], float("nan"), "curvature",
            f"No laps: the run drove {total:.0f} m, less than one lap of {lap:.0f} m.",
            grid_m=dx,
        )  # fmt: skip
    lap_g = lap / dx
    method = "start line" if start_m is not None else "curvature"
    if start_m is not None and not (np.isfinite(start_m) and 0 <= start_m < total):
        raise CompareError(
            f"The start line must lie on the run, between 0 m and {total:.1f} m from its "
            f"start; found {start_m} m. Give a distance along the run."
        )
    if template is None:
        g0 = 0 if start_m is None else int(round(start_m / dx))
        if g0 + int(lap_g) >= n:
            g0 = 0
        first = trace.curvature[g0 : g0 + int(round(lap_g))]
        if start_m is None and g0 + 2 * lap_g < n:
            # Re-anchor on the next crossing: its lap is driven at pace on the loop.
            b1, _ = _best_near(_match_curve(trace, first), g0 + lap_g, SEARCH_SHARE * lap_g)
            if np.isfinite(b1):
                g0 = int(round(b1))
        tmpl = trace.curvature[g0 : g0 + int(round(lap_g))]
        anchor = float(g0)
    else:
        tmpl = np.asarray(template, dtype=float)
        match0 = _match_curve(trace, tmpl)
        anchor, _ = _best_near(match0, 0.5 * lap_g, 0.5 * lap_g + SEARCH_SHARE * lap_g)
        if not np.isfinite(anchor):
            return LapSet([], float("nan"), "template", "No laps: the run does not match the "
                          "reference lap anywhere near its start.", grid_m=dx)  # fmt: skip
    match = _match_curve(trace, tmpl)
    if start_m is not None and template is None:
        anchor = float(start_m / dx)
    bounds_g, matches = _boundaries(match, anchor, lap_g, n)
    bounds = [b * dx for b in bounds_g]
    if start_m is None and bounds[0] < START_SNAP_M:
        bounds[0] = 0.0
    times = _time_at(trace, t, np.asarray(bounds))
    t0, t_end = float(t[0]), float(t[-1])
    laps: list[Lap] = []
    if bounds[0] > 0.0:
        laps.append(Lap(1, t0, float(times[0]), 0.0, bounds[0], True))
    for i in range(len(bounds) - 1):
        laps.append(
            Lap(len(laps) + 1, float(times[i]), float(times[i + 1]), bounds[i], bounds[i + 1],
                False, matches[i])
        )  # fmt: skip
    rest = total - bounds[-1]
    if rest >= lap - START_SNAP_M and _matches_start(trace, tmpl, bounds_g[-1]):
        # The run ends on the start line (or just past it): the last lap is complete,
        # though no whole template fits beyond its end to find that crossing.
        end = min(total, bounds[-1] + tmpl.size * dx)
        t_cross = float(_time_at(trace, t, np.array([end]))[0])
        laps.append(Lap(len(laps) + 1, float(times[-1]), t_cross, bounds[-1], end, False,
                        matches[-1]))  # fmt: skip
        bounds.append(end)
        times = np.append(times, t_cross)
        matches.append(float("nan"))
    if total - bounds[-1] > START_SNAP_M:
        laps.append(Lap(len(laps) + 1, float(times[-1]), t_end, bounds[-1], total, True,
                        matches[-1]))  # fmt: skip
    complete = [lap.length_m for lap in laps if not lap.partial]
    residual = _median_residual(trace, tmpl, [lap.start_m / dx for lap in laps if not lap.partial])
    if complete and residual > MAX_LAP_RESIDUAL:
        return LapSet(
            [], float("nan"), method,
            f"No laps: the course shape repeats every {lap:.0f} m in form only; its curves "
            f"differ from lap to lap by {100 * residual:.0f}% (RMS) of the curvature, more "
            f"than the {100 * MAX_LAP_RESIDUAL:.0f}% of one loop driven again.",
            grid_m=dx,
        )  # fmt: skip
    if not complete:
        return LapSet(
            [], float("nan"), method,
            f"No complete lap: the course shape of {lap:.0f} m repeats, but no lap was "
            f"driven from start line to start line.",
            grid_m=dx,
        )  # fmt: skip
    med = float(np.median(complete))
    n_partial = sum(lap.partial for lap in laps)
    reason = (
        f"{len(complete)} complete laps of about {med:.1f} m"
        + (f" and {n_partial} partial" if n_partial else "")
        + (" (start line given)." if start_m is not None else " (from the repeating course shape).")
    )
    return LapSet(laps, med, method, reason, anchor * dx, tmpl.copy(), dx)


def detect_laps(
    frame: pd.DataFrame,
    profile: RobotProfile | None = None,
    *,
    start_m: float | None = None,
    lap_length_m: float | None = None,
    template: np.ndarray | None = None,
) -> LapSet:
    """Find the laps of a run on a closed loop.

    Parameters
    ----------
    frame : DataFrame
        Column ``t`` [s], ``yaw_rate`` [rad/s] and ``vel_x`` [m/s] (or wheel
        velocities with the profile).
    profile : RobotProfile, optional
        For wheel odometry when ``vel_x`` is missing.
    start_m, lap_length_m, template
        See :func:`laps_from_trace`.

    Returns
    -------
    LapSet
        Without ``yaw_rate`` or a speed source: no laps, with the reason.
    """
    try:
        trace = course_trace(frame, profile)
    except CompareError as exc:
        return LapSet([], float("nan"), "curvature", f"No laps: {exc}")
    t = frame[cat.T].to_numpy(dtype=float)
    return laps_from_trace(trace, t, start_m=start_m, lap_length_m=lap_length_m, template=template)


def find_laps(
    frame: pd.DataFrame, profile: RobotProfile | None = None, start_m: float | None = None
) -> LapSet:
    """:func:`detect_laps` for the analysis: a start line off the run gives no laps, with why.

    Parameters
    ----------
    frame : DataFrame
    profile : RobotProfile, optional
    start_m : float, optional
        Start line stored for the run's course, from the run's start. [m]
    """
    try:
        return detect_laps(frame, profile, start_m=start_m)
    except CompareError as exc:
        return LapSet([], float("nan"), "start line", f"No laps: {exc}")


def lap_of_samples(t: np.ndarray, laps: list[Lap]) -> np.ndarray:
    """Index into ``laps`` of each sample time, -1 outside every lap.

    Parameters
    ----------
    t : ndarray
        Sample times. [s]
    laps : list of Lap
        Contiguous laps in driving order.
    """
    out = np.full(np.asarray(t).size, -1, dtype=int)
    if not laps:
        return out
    starts = np.array([lap.start_s for lap in laps])
    ends = np.array([lap.end_s for lap in laps])
    i = np.searchsorted(starts, t, side="right") - 1
    ok = (i >= 0) & (t < ends[np.clip(i, 0, None)])
    ok |= (i == len(laps) - 1) & (t <= ends[-1])
    out[ok] = i[ok]
    return out


def lap_units(t: np.ndarray, laps: list[Lap], *, complete_only: bool = True) -> list[np.ndarray]:
    """Replicate units for a bootstrap over laps: the sample indices of each lap.

    Parameters
    ----------
    t : ndarray
        Sample times of the run. [s]
    laps : list of Lap
    complete_only : bool
        Leave partial laps out (they cover only part of the course).

    Returns
    -------
    list of ndarray of int
        One array of sample indices per lap, in driving order.
    """
    idx = lap_of_samples(np.asarray(t, dtype=float), laps)
    order = np.argsort(idx, kind="stable")
    bounds = np.searchsorted(idx[order], np.arange(len(laps) + 1))
    units = [order[bounds[i] : bounds[i + 1]] for i in range(len(laps))]
    return [u for u, lap in zip(units, laps, strict=True) if not (complete_only and lap.partial)]
