"""Signal metrics: IAE, ISE, ITAE, RMS, time shares, lag by cross-correlation, low-pass.

These are plain functions of a time base and a signal, shared by the roll
tracking detector and by the comparison of two runs. Integrals use the
trapezoid rule over sample intervals and never integrate across a data gap
(an interval longer than :data:`analysis.events.GAP_FACTOR` median periods) or
a NaN sample, so a log with holes gives the integral over the time that was
actually logged. The zero-phase low-pass filters each gap-free stretch alone.

References
----------
.. [1] R. C. Dorf and R. H. Bishop, Modern Control Systems, 13th ed.
   Pearson, 2017 (performance indices).
.. [2] J. S. Bendat and A. G. Piersol, Random Data: Analysis and Measurement
   Procedures, 4th ed. Wiley, 2010 (correlation functions and their estimates).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import fft as sp_fft
from scipy import signal as sps

from analysis.events import GAP_FACTOR, data_gaps, median_period

#: Order of each pass of the Butterworth low-pass; run forward and backward the
#: magnitude is |H|^2, i.e. -6 dB at the cut-off (scipy.signal.sosfiltfilt).
FILTER_ORDER = 2


def _interval_terms(t: np.ndarray, f: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Trapezoid areas and lengths of the usable sample intervals of ``f`` over ``t``."""
    t = np.asarray(t, dtype=float)
    f = np.asarray(f, dtype=float)
    if t.shape != f.shape:
        raise ValueError(
            f"t and the signal must have the same length, found {t.size} and {f.size}."
        )
    if t.size < 2:
        return np.zeros(0), np.zeros(0)
    dt = np.diff(t)
    ok = np.isfinite(f[:-1]) & np.isfinite(f[1:]) & ~data_gaps(t, GAP_FACTOR) & (dt > 0)
    area = np.where(ok, 0.5 * (np.nan_to_num(f[:-1]) + np.nan_to_num(f[1:])) * dt, 0.0)
    return area, np.where(ok, dt, 0.0)


def integrate(t: np.ndarray, f: np.ndarray) -> float:
    """Trapezoid integral of ``f`` over ``t``, skipping NaN samples and data gaps.

    Parameters
    ----------
    t : ndarray
        Sample times, increasing. [s]
    f : ndarray
        Integrand. [unit of f]

    Returns
    -------
    float
        Integral. [unit of f * s]
    """
    area, _ = _interval_terms(t, f)
    return float(area.sum())


def logged_time(t: np.ndarray, f: np.ndarray) -> float:
    """Total length of the sample intervals usable for ``f`` (no NaN end, no data gap). [s]"""
    _, length = _interval_terms(t, f)
    return float(length.sum())


def iae(t: np.ndarray, e: np.ndarray) -> float:
    """Integral of the absolute error.

    Parameters
    ----------
    t : ndarray
        Sample times, increasing. [s]
    e : ndarray
        Error, reference minus output. [unit of e]

    Returns
    -------
    float
        IAE. [unit of e * s]

    Notes
    -----
    ``IAE = integral |e(t)| dt`` ([1], performance indices), by the trapezoid rule over
    the logged intervals.

    References
    ----------
    .. [1] R. C. Dorf and R. H. Bishop, Modern Control Systems, 13th ed.
       Pearson, 2017.
    """
    return integrate(t, np.abs(np.asarray(e, dtype=float)))  # [1] IAE


def ise(t: np.ndarray, e: np.ndarray) -> float:
    """Integral of the squared error.

    Parameters
    ----------
    t : ndarray
        Sample times, increasing. [s]
    e : ndarray
        Error, reference minus output. [unit of e]

    Returns
    -------
    float
        ISE. [unit of e squared * s]

    Notes
    -----
    ``ISE = integral e(t)^2 dt`` ([1], performance indices).

    References
    ----------
    .. [1] R. C. Dorf and R. H. Bishop, Modern Control Systems, 13th ed.
       Pearson, 2017.
    """
    e = np.asarray(e, dtype=float)
    return integrate(t, e * e)  # [1] ISE


def itae(t: np.ndarray, e: np.ndarray) -> float:
    """Integral of time multiplied by the absolute error.

    Parameters
    ----------
    t : ndarray
        Sample times, increasing; the time weight is counted from ``t[0]``. [s]
    e : ndarray
        Error, reference minus output. [unit of e]

    Returns
    -------
    float
        ITAE. [unit of e * s^2]

    Notes
    -----
    ``ITAE = integral (t - t0) |e(t)| dt`` ([1], performance indices) with ``t0 = t[0]``,
    the start of the run (or of the window analysed).

    References
    ----------
    .. [1] R. C. Dorf and R. H. Bishop, Modern Control Systems, 13th ed.
       Pearson, 2017.
    """
    t = np.asarray(t, dtype=float)
    if t.size == 0:
        return 0.0
    return integrate(t, (t - t[0]) * np.abs(np.asarray(e, dtype=float)))  # [1] ITAE


def rms(t: np.ndarray, e: np.ndarray) -> float:
    """Time-weighted root mean square over the logged intervals.

    Parameters
    ----------
    t : ndarray
        Sample times, increasing. [s]
    e : ndarray
        Signal. [unit of e]

    Returns
    -------
    float
        ``sqrt(ISE / T)`` with T the logged time; NaN when nothing is logged. [unit of e]

    Notes
    -----
    ``RMS = sqrt( (1/T) integral e(t)^2 dt )`` ([1], mean square value), weighted by time
    so that uneven sampling does not bias it.

    References
    ----------
    .. [1] J. S. Bendat and A. G. Piersol, Random Data: Analysis and Measurement
       Procedures, 4th ed. Wiley, 2010.
    """
    e = np.asarray(e, dtype=float)
    area, length = _interval_terms(t, e * e)
    total = float(length.sum())
    if total <= 0:
        return float("nan")
    return float(np.sqrt(area.sum() / total))  # [1] mean square value


def interval_halves(t: np.ndarray) -> np.ndarray:
    """Half of each sample interval, 0 across a data gap (or a repeated time).

    What :func:`sample_durations` builds on; found once when several signals share
    the time axis ``t`` (increasing) [s]. Length ``len(t) - 1``. [s]
    """
    t = np.asarray(t, dtype=float)
    if t.size < 2:
        return np.zeros(0)
    dt = np.diff(t)
    return np.where(~data_gaps(t, GAP_FACTOR) & (dt > 0), 0.5 * dt, 0.0)


def sample_durations(
    t: np.ndarray, valid: np.ndarray | None = None, halves: np.ndarray | None = None
) -> np.ndarray:
    """Time each sample stands for: half of each usable neighbouring interval.

    Parameters
    ----------
    t : ndarray
        Sample times, increasing. [s]
    valid : ndarray of bool, optional
        Samples that count; intervals touching an invalid sample or spanning a
        data gap stand for nobody.
    halves : ndarray, optional
        ``interval_halves(t)``, when already found for another signal on ``t``.

    Returns
    -------
    ndarray
        Duration of each sample; their sum is the logged time. [s]
    """
    t = np.asarray(t, dtype=float)
    if t.size < 2:
        return np.zeros(t.size)
    half = interval_halves(t) if halves is None else halves
    if valid is not None:
        ok_s = np.asarray(valid, dtype=bool)
        half = np.where(ok_s[:-1] & ok_s[1:], half, 0.0)
    w = np.zeros(t.size)
    w[:-1] += half
    w[1:] += half
    return w


def time_where(t: np.ndarray, condition: np.ndarray, valid: np.ndarray) -> tuple[float, float]:
    """Time and share of the logged time where ``condition`` holds.

    Parameters
    ----------
    t : ndarray
        Sample times, increasing. [s]
    condition : ndarray of bool
        Per-sample condition.
    valid : ndarray of bool
        Samples that were logged (finite signal).

    Returns
    -------
    (float, float)
        Time where the condition holds [s] and its share of the logged time [-]
        (NaN when nothing is logged).
    """
    w = sample_durations(t, valid)
    total = float(w.sum())
    inside = float(w[np.asarray(condition, dtype=bool) & np.asarray(valid, dtype=bool)].sum())
    return inside, (inside / total if total > 0 else float("nan"))


#: Largest uniform grid :func:`lag_by_xcorr` builds, in points per sample of the input: the
#: memory of an analysis follows the run's sample count, never its duration. [-]
MAX_GRID_FACTOR = 8


@dataclass(frozen=True)
class LagEstimate:
    """Result of :func:`lag_by_xcorr`.

    Attributes
    ----------
    lag_s : float
        Lag of ``y`` behind ``ref``, positive when ``y`` follows ``ref``; NaN if
        it cannot be estimated. [s]
    correlation : float
        Normalised cross-correlation at the peak (Pearson-like, -1..1). [-]
    at_bound : bool
        The peak lies at the edge of the search window: the true lag may be larger.
    reason : str or None
        Why the lag is NaN, if it is.
    """

    lag_s: float
    correlation: float
    at_bound: bool
    reason: str | None = None


def _uniform(t: np.ndarray, x: np.ndarray, grid: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Linear interpolation of ``x`` onto ``grid``; grid points in gaps or NaN runs are invalid."""
    ok = np.isfinite(x)
    tv, xv = t[ok], x[ok]
    if tv.size < 2:
        return np.zeros(grid.size), np.zeros(grid.size, dtype=bool)
    values = np.interp(grid, tv, xv)
    # Intervals between valid samples longer than GAP_FACTOR median periods are holes.
    med = median_period(t)
    hole = np.diff(tv) > GAP_FACTOR * med
    inside = (grid >= tv[0]) & (grid <= tv[-1])
    if hole.any():
        k = np.clip(np.searchsorted(tv, grid, side="right") - 1, 0, tv.size - 2)
        inside &= ~hole[k]
    return values, inside


def _xcorr_window(a: np.ndarray, b: np.ndarray, max_k: int) -> np.ndarray:
    """``sum_n a[n + k] b[n]`` for ``k = -max_k .. max_k``, by FFT padded just enough."""
    size = sp_fft.next_fast_len(a.size + max_k, real=True)
    full = sp_fft.irfft(sp_fft.rfft(a, size) * np.conj(sp_fft.rfft(b, size)), size)
    return np.concatenate((full[size - max_k :], full[: max_k + 1]))


def lag_by_xcorr(t: np.ndarray, ref: np.ndarray, y: np.ndarray, max_lag_s: float) -> LagEstimate:
    """Lag of ``y`` behind ``ref`` from the peak of their cross-correlation.

    Parameters
    ----------
    t : ndarray
        Sample times, increasing, possibly uneven or with gaps. [s]
    ref : ndarray
        Reference signal. [any unit]
    y : ndarray
        Output that follows the reference. [unit of ref]
    max_lag_s : float
        Largest lag searched, either way. [s]

    Returns
    -------
    LagEstimate
        Lag in seconds (positive: ``y`` lags ``ref``), peak correlation, and
        whether the peak is at the search bound.

    Notes
    -----
    Both signals are interpolated onto a uniform grid with the median sample
    period; grid points inside data gaps or NaN runs are left out. After removing
    the means, the cross-correlation ``R(k) = sum_n ref[n] y[n + k]`` over the
    pairs where both are logged ([1], cross-correlation function and its sample
    estimate) is divided by ``sqrt(sum ref[n]^2 * sum y[n + k]^2)`` over the same
    pairs, so neither the shrinking overlap nor holes bias it toward lag zero;
    lags where fewer than half the pairs overlap are not considered.
    Its maximum over ``|k dt| <= max_lag_s`` is refined to a fraction of a
    sample by fitting a parabola through the peak and its two neighbours
    (``delta = (R[-1] - R[+1]) / (2 (R[-1] - 2 R[0] + R[+1]))``, common
    practice, no source).

    References
    ----------
    .. [1] J. S. Bendat and A. G. Piersol, Random Data: Analysis and Measurement
       Procedures, 4th ed. Wiley, 2010.
    """
    t = np.asarray(t, dtype=float)
    ref = np.asarray(ref, dtype=float)
    y = np.asarray(y, dtype=float)
    if t.size < 4:
        return LagEstimate(float("nan"), float("nan"), False, f"only {t.size} samples")
    dt = median_period(t)
    if not dt > 0:
        return LagEstimate(float("nan"), float("nan"), False, "time base does not increase")
    steps = np.diff(t)
    if np.all(np.abs(steps - dt) <= 1e-6 * dt):  # already uniform: use the samples as they are
        n = t.size
        r_ok, v_ok = np.isfinite(ref), np.isfinite(y)
        r, v = np.where(r_ok, ref, 0.0), np.where(v_ok, y, 0.0)
    else:
        n = int(min(np.floor((t[-1] - t[0]) / dt), MAX_GRID_FACTOR * t.size)) + 1
        if n > MAX_GRID_FACTOR * t.size:  # the grid is bounded by the samples, never by time
            return LagEstimate(
                float("nan"),
                float("nan"),
                False,
                f"the {t.size} samples span {t[-1] - t[0]:.3g} s, mostly gaps: a uniform grid "
                f"would hold more than {MAX_GRID_FACTOR} points per sample",
            )
        grid = t[0] + dt * np.arange(n)
        r, r_ok = _uniform(t, ref, grid)
        v, v_ok = _uniform(t, y, grid)
    both = r_ok & v_ok
    if both.sum() < 4:
        return LagEstimate(
            float("nan"), float("nan"), False, "fewer than 4 samples where both are logged"
        )
    r = np.where(r_ok, r - r[both].mean(), 0.0)
    v = np.where(v_ok, v - v[both].mean(), 0.0)
    if not (np.any(r[both] != 0) and np.any(v[both] != 0)):
        return LagEstimate(float("nan"), float("nan"), False, "a signal is constant")
    max_k = min(n - 1, max(1, int(np.floor(max_lag_s / dt))))
    lags = np.arange(-max_k, max_k + 1)
    # [1] R(k) = sum_n ref[n] y[n + k], normalised by the energies of the pairs used.
    num = _xcorr_window(v, r, max_k)
    if both.all():  # no holes: pair counts and energies from cumulative sums
        cs_r = np.concatenate(([0.0], np.cumsum(r * r)))
        cs_v = np.concatenate(([0.0], np.cumsum(v * v)))
        pos = np.maximum(lags, 0)
        neg = np.maximum(-lags, 0)
        pairs = (n - np.abs(lags)).astype(float)
        e_r = cs_r[n - pos] - cs_r[neg]  # ref samples n with 0 <= n + k < N
        e_v = cs_v[n - neg] - cs_v[pos]  # y samples n + k with 0 <= n < N
    else:
        r_okf, v_okf = r_ok.astype(float), v_ok.astype(float)
        pairs = _xcorr_window(v_okf, r_okf, max_k)
        e_r = _xcorr_window(v_okf, r * r, max_k)
        e_v = _xcorr_window(v * v, r_okf, max_k)
    usable = pairs > 0.5 * max(1.0, pairs.max()) if pairs.size else pairs > 0
    with np.errstate(invalid="ignore", divide="ignore"):
        corr = np.where(usable, num / np.sqrt(np.clip(e_r * e_v, 1e-300, None)), -np.inf)
    i = int(np.argmax(corr))
    if not np.isfinite(corr[i]):
        return LagEstimate(float("nan"), float("nan"), False, "too little overlap")
    at_bound = i == 0 or i == corr.size - 1
    delta = 0.0
    if not at_bound and np.isfinite(corr[i - 1]) and np.isfinite(corr[i + 1]):
        den = corr[i - 1] - 2.0 * corr[i] + corr[i + 1]
        if den < 0:
            delta = float(0.5 * (corr[i - 1] - corr[i + 1]) / den)
    return LagEstimate(float((lags[i] + delta) * dt), float(corr[i]), bool(at_bound))


# --- zero-phase low-pass ---------------------------------------------------------


@dataclass
class FilterReport:
    """What :func:`lowpass_zero_phase` did: segments filtered, short or unfiltered ones."""

    segments: int = 0
    short_segments: int = 0
    unfiltered_segments: int = 0


def lowpass_zero_phase(
    t: np.ndarray,
    x: np.ndarray,
    cutoff_hz: float,
    order: int = FILTER_ORDER,
    report: FilterReport | None = None,
) -> np.ndarray:
    """Zero-phase Butterworth low-pass, applied to each gap-free stretch of samples.

    Parameters
    ----------
    t : ndarray
        Sample times, increasing. [s]
    x : ndarray
        Signal; NaN samples stay NaN. [any unit]
    cutoff_hz : float
        Cut-off of one pass (-3 dB); the forward-backward result is -6 dB there.
        0 means no filtering. [Hz]
    order : int
        Order of each pass. [-]
    report : FilterReport, optional
        Filled with counts of segments, short segments and unfiltered segments.

    Returns
    -------
    ndarray
        Filtered signal, same length, NaN where ``x`` is NaN. [unit of x]

    Notes
    -----
    Stretches are split at data gaps and at NaN runs longer than
    ``GAP_FACTOR`` median sample periods; shorter NaN runs are bridged by
    linear interpolation for the filter only. Each stretch is filtered with
    ``scipy.signal.butter(order, cutoff, fs=1/median(dt), output="sos")`` (the
    median period of the whole of ``t``, the same for every stretch) and
    ``sosfiltfilt`` ([1]: forward-backward filtering cancels the phase, the
    magnitude becomes ``|H(f)|^2``). A stretch not longer than the default edge
    padding is filtered with padding ``n - 1``; a stretch whose Nyquist
    frequency is not above the cut-off is left unfiltered.

    References
    ----------
    .. [1] F. Gustafsson, "Determining the initial states in forward-backward
       filtering," IEEE Trans. Signal Processing, 44(4), 988-992, 1996.
       doi:10.1109/78.492552
    """
    t = np.asarray(t, dtype=float)
    x = np.asarray(x, dtype=float)
    rep = report if report is not None else FilterReport()
    out = np.full(x.shape, np.nan)
    idx = np.flatnonzero(np.isfinite(x))
    if idx.size == 0:
        return out
    if cutoff_hz <= 0 or t.size < 2:
        out[idx] = x[idx]
        return out
    med = median_period(t)
    brk = np.flatnonzero(np.diff(t[idx]) > GAP_FACTOR * med)
    firsts = np.concatenate(([0], brk + 1))
    lasts = np.concatenate((brk, [idx.size - 1]))
    for a, b in zip(idx[firsts], idx[lasts], strict=True):  # loop over stretches
        rep.segments += 1
        ts, xs = t[a : b + 1], x[a : b + 1]
        ok = np.isfinite(xs)
        n = xs.size
        # One sample rate for the whole run (its median period), so that a run
        # analysed in time chunks filters exactly as in one pass.
        fs = 1.0 / med if n > 1 else 0.0
        if n < 2 or cutoff_hz >= 0.5 * fs:
            rep.unfiltered_segments += 1
            out[a : b + 1] = xs
            continue
        filled = np.interp(ts, ts[ok], xs[ok])
        sos = sps.butter(order, cutoff_hz, btype="low", fs=fs, output="sos")
        pad = 3 * (2 * len(sos) + 1)  # scipy.signal.sosfiltfilt default padding
        if n <= pad:
            rep.short_segments += 1
            pad = n - 1
        y = sps.sosfiltfilt(sos, filled, padlen=pad)
        out[a : b + 1] = np.where(ok, y, np.nan)
    return out
