"""The roll lag of :func:`analysis.metrics.lag_by_xcorr` over a whole run, read in chunks.

The cross-correlation peak needs every sample of the run, but not at once: after
the means are known (a first pass of sums), ``R(k) = sum_n ref[n] y[n + k]`` and
the energies of the pairs used are sums over n, so each chunk of the uniform grid
adds its terms, with ``max_k`` grid points of the neighbours on either side.
Grid values are the same linear interpolations between the same two logged
samples as in one pass (the last logged sample before a chunk is carried over);
a grid point farther than a data gap from the next logged sample is in a hole,
as there. Only the order of the additions differs from
:func:`~analysis.metrics.lag_by_xcorr`, so the lag agrees to rounding.
"""

from __future__ import annotations

from collections.abc import Callable

import numpy as np

from analysis.events import GAP_FACTOR
from analysis.metrics import LagEstimate, _xcorr_window

#: Reads (t, ref, y) of the run between two times, inclusive. [s]
Reader = Callable[[float, float], tuple[np.ndarray, np.ndarray, np.ndarray]]


class _Grid:
    """Values of one signal on grid points, with the logged sample carried between chunks."""

    def __init__(self, t0: float, dt: float, t_end_valid: float, uniform: bool) -> None:
        self.t0, self.dt, self.uniform = t0, dt, uniform
        self.t_end_valid = t_end_valid  # last logged sample of the whole run [s]
        self.t_first_valid = float("nan")
        self.carry: tuple[float, float] | None = None

    def values(
        self, t: np.ndarray, x: np.ndarray, g0: int, g1: int, med: float
    ) -> tuple[np.ndarray, np.ndarray]:
        """Values and validity on grid points g0..g1-1 from the samples (t, x) around them."""
        if self.uniform:
            # samples are the grid: grid point i is sample i of the run
            return np.where(np.isfinite(x), x, 0.0), np.isfinite(x)
        ok = np.isfinite(x)
        tv, xv = t[ok], x[ok]
        if self.carry is not None and (not tv.size or tv[0] > self.carry[0]):
            tv = np.concatenate(([self.carry[0]], tv))
            xv = np.concatenate(([self.carry[1]], xv))
        grid = self.t0 + self.dt * np.arange(g0, g1)
        if tv.size < 2:
            return np.zeros(grid.size), np.zeros(grid.size, dtype=bool)
        vals = np.interp(grid, tv, xv)
        hole = np.diff(tv) > GAP_FACTOR * med
        inside = (grid >= self.t_first_valid) & (grid <= self.t_end_valid)
        # Before the first or after the last logged sample read (none carried over):
        # the nearest logged neighbour is farther than a gap, so the point is in a hole.
        inside &= (grid >= tv[0]) & (grid <= tv[-1])
        k = np.clip(np.searchsorted(tv, grid, side="right") - 1, 0, tv.size - 2)
        inside &= ~hole[k]
        return vals, inside


def _uniform(t: np.ndarray, dt: float, block: int = 1 << 20) -> bool:
    """Every step of ``t`` within 1e-6 dt of ``dt`` (checked a block at a time). [s]"""
    for a in range(0, max(t.size - 1, 0), block):
        steps = np.diff(t[a : a + block + 1])
        if not np.all(np.abs(steps - dt) <= 1e-6 * dt):
            return False
    return True


def lag_in_chunks(
    read: Reader,
    t_all: np.ndarray,
    valid_span: Callable[[], tuple[float, float, float, float]],
    max_lag_s: float,
    chunk_s: float,
    med: float,
) -> LagEstimate:
    """:func:`analysis.metrics.lag_by_xcorr` of the run, reading ``chunk_s`` at a time.

    Parameters
    ----------
    read : callable
        ``read(t0, t1)`` -> (t, ref, y) of the run between two times, inclusive. [s]
    t_all : ndarray
        The run's time axis. [s]
    valid_span : callable
        -> first and last time where ref is logged, the same for y. [s]
    max_lag_s : float
        Largest lag searched, either way. [s]
    chunk_s : float
        Grid span per chunk. [s]
    med : float
        The run's median sample interval. [s]
    """
    n_t = t_all.size
    if n_t < 4:
        return LagEstimate(float("nan"), float("nan"), False, f"only {n_t} samples")
    dt = med
    if not dt > 0:
        return LagEstimate(float("nan"), float("nan"), False, "time base does not increase")
    uniform = _uniform(t_all, dt)
    t0 = float(t_all[0])
    n = n_t if uniform else int(np.floor((t_all[-1] - t0) / dt)) + 1
    max_k = min(n - 1, max(1, int(np.floor(max_lag_s / dt))))
    r_first, r_last, y_first, y_last = valid_span()
    per = max(int(chunk_s / dt), 4 * max_k + 4)
    bounds = list(range(0, n, per)) + [n]

    def grid_time(i: int) -> float:
        return float(t_all[min(i, n_t - 1)]) if uniform else t0 + dt * i

    def chunks(extra: int):  # grid ranges with `extra` points either side
        gr, gy = _Grid(t0, dt, r_last, uniform), _Grid(t0, dt, y_last, uniform)
        gr.t_first_valid, gy.t_first_valid = r_first, y_first
        reach = (GAP_FACTOR + 2) * med  # logged samples just outside, for interpolation
        for a, b in zip(bounds[:-1], bounds[1:], strict=True):
            lo, hi = max(a - extra, 0), min(b + extra, n)
            t, ref, y = read(grid_time(lo) - reach, grid_time(hi - 1) + reach)
            if uniform:
                i0 = int(np.searchsorted(t_all, t[0])) if t.size else lo
                sl = slice(lo - i0, hi - i0)
                t, ref, y = t[sl], ref[sl], y[sl]
            rv, rok = gr.values(t, ref, lo, hi, med)
            yv, yok = gy.values(t, y, lo, hi, med)
            for g, x in ((gr, ref), (gy, y)):
                ok = np.isfinite(x) & (t <= grid_time(b - 1) + 1e-12)
                if ok.any():
                    j = int(np.flatnonzero(ok)[-1])
                    g.carry = (float(t[j]), float(x[j]))
            yield a, b, lo, hi, rv, rok, yv, yok

    # pass 1: means over the grid points where both are logged
    sums = np.zeros(3)
    for a, b, lo, _, rv, rok, yv, yok in chunks(0):
        both = (rok & yok)[a - lo : b - lo]
        sums += (rv[a - lo : b - lo][both].sum(), yv[a - lo : b - lo][both].sum(), both.sum())
    if sums[2] < 4:
        return LagEstimate(
            float("nan"), float("nan"), False, "fewer than 4 samples where both are logged"
        )
    mean_r, mean_y = sums[0] / sums[2], sums[1] / sums[2]
    # pass 2: the correlation sums, each core with max_k grid points either side
    size = 2 * max_k + 1
    num, pairs, e_r, e_v = (np.zeros(size) for _ in range(4))
    nonzero = [False, False]
    for a, b, lo, hi, rv, rok, yv, yok in chunks(max_k):
        r = np.where(rok, rv - mean_r, 0.0)
        v = np.where(yok, yv - mean_y, 0.0)
        both = (rok & yok)[a - lo : b - lo]
        nonzero[0] |= bool(np.any(r[a - lo : b - lo][both] != 0))
        nonzero[1] |= bool(np.any(v[a - lo : b - lo][both] != 0))
        # ref at the core's points only; y at the core's points and max_k either side,
        # laid out so that index m of both arrays is grid point lo - max_k + m.
        width = (b - a) + 2 * max_k
        r_core = np.zeros(width)
        ok_core = np.zeros(width)
        r_core[max_k : max_k + b - a] = r[a - lo : b - lo]
        ok_core[max_k : max_k + b - a] = rok[a - lo : b - lo]
        v_ext = np.zeros(width)
        ok_ext = np.zeros(width)
        off = a - max_k - lo  # where grid point lo sits in the extended layout (<= 0)
        v_ext[-off : -off + (hi - lo)] = v
        ok_ext[-off : -off + (hi - lo)] = yok
        num += _xcorr_window(v_ext, r_core, max_k)
        pairs += _xcorr_window(ok_ext, ok_core, max_k)
        e_r += _xcorr_window(ok_ext, r_core * r_core, max_k)
        e_v += _xcorr_window(v_ext * v_ext, ok_core, max_k)
    if not (nonzero[0] and nonzero[1]):
        return LagEstimate(float("nan"), float("nan"), False, "a signal is constant")
    lags = np.arange(-max_k, max_k + 1)
    usable = pairs > 0.5 * max(1.0, pairs.max())
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
