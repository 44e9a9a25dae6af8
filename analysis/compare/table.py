"""The KPI table of a comparison: every KPI overall and per segment, with corrected verdicts.

:func:`compare_units` is the statistical core of :func:`analysis.compare.compare.compare_runs`
and of any comparison over other replicate units (laps): it takes the units of
each version (:class:`analysis.compare.replicates.ReplicateUnit`) on shared
course blocks and returns one :class:`KpiRow` per KPI, overall and per segment.
Three things keep the verdicts honest:

1. **Units.** With at least two units (runs, or laps) of each version the
   difference rests on them (:func:`analysis.compare.replicates.welch_difference`);
   with one, the block bootstrap of :mod:`analysis.compare.bootstrap` shows the
   spread within that run only (pseudo-replication, [2]), and every row says so
   in ``basis``.
2. **Many cells.** The overall rows are one family of tests and the segment
   rows another; in each, calls are kept only where the Benjamini-Hochberg
   adjusted p-value is at most ``1 - level`` (false discovery rate 5 % at a 95 %
   level; [1], :mod:`analysis.compare.fdr`). ``raw_verdict`` keeps the uncorrected call.
3. **Speed.** Tip-over margin, slip and roll error depend on the speed driven;
   where the mean speeds of the versions differ by more than ``speed_share`` of
   A's, a speed-dependent KPI gets no verdict in that cell (``speed_flag`` says why).

Extremes (peak slip speed, minimum tip-over margin, maximum roll error) are
indicative: difference and a rough block-bootstrap interval, no verdict, no test.

References
----------
.. [1] Y. Benjamini and Y. Hochberg, "Controlling the false discovery rate: a
   practical and powerful approach to multiple testing", J. R. Stat. Soc. B 57
   (1995) 289-300. doi:10.1111/j.2517-6161.1995.tb02031.x
.. [2] S. H. Hurlbert, "Pseudoreplication and the design of ecological field
   experiments", Ecological Monographs 54 (1984) 187-211. doi:10.2307/1942661
"""

from __future__ import annotations

import math
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field, replace
from typing import Any

import numpy as np

from analysis.compare.bootstrap import (
    BETTER,
    LEVEL,
    N_BOOT,
    NO_CLEAR,
    NO_VERDICT,
    WORSE,
    Difference,
    Pieces,
    bootstrap_difference,
    verdict,
)
from analysis.compare.course_kpis import KpiDef, block_pieces, kpi_definitions, tip_edges
from analysis.compare.fdr import bh_adjust
from analysis.compare.replicates import (
    MIN_UNITS,
    UNIT_KINDS,
    ReplicateUnit,
    basis_text,
    unit_values,
    welch_difference,
)
from analysis.compare.segments import Segment
from analysis.errors import CompareError

#: Mean speeds of the versions in a cell may differ by this share of A's before the
#: speed-dependent KPIs of that cell lose their verdict. [-]
#: (common practice, no source: the calibration benchmark drives each run within
#: +-5 % of the planned speeds, so two runs of one controller differ by up to
#: about 10 %; more than that is a different way of driving the course)
SPEED_SHARE = 0.10


@dataclass(frozen=True)
class KpiRow:
    """One KPI of the comparison: both values, the difference, its interval and verdict.

    Attributes
    ----------
    a, b, diff, diff_pct, low, high : float
        Values of A and B (unit means when the row rests on units, else the
        pooled KPI), ``b - a``, the change in percent of A, and the interval of
        ``b - a``. [KPI unit, % for diff_pct]
    verdict : str
        ``better``, ``worse``, ``no clear difference`` or ``no verdict``
        (indicative extreme, or speeds too different), after the correction
        for many cells.
    raw_verdict : str
        The verdict of the interval alone, before the correction.
    p, q : float
        p-value of "no difference" and its Benjamini-Hochberg adjusted value
        within the row's table (NaN when the row is not tested). [-]
    basis : str
        What the verdict rests on: ``"3 runs per version"``, ``"1 run per
        version: within-run spread only"``, plus the speed check.
    indicative : bool
        An extreme: difference and rough interval only.
    speed_a, speed_b : float
        Mean speed of each version in the row's stretch. [m/s]
    speed_flag : str or None
        Why a speed-dependent KPI got no verdict, when it did not.
    n_blocks : int
        Blocks resampled, or the fewer units. [-]
    """

    key: str
    metric: str
    channel: str | None
    label: str
    unit: str
    better: str
    a: float
    b: float
    diff: float
    diff_pct: float
    low: float
    high: float
    verdict: str
    n_blocks: int
    raw_verdict: str = NO_CLEAR
    p: float = float("nan")
    q: float = float("nan")
    basis: str = ""
    indicative: bool = False
    speed_a: float = float("nan")
    speed_b: float = float("nan")
    speed_flag: str | None = None

    @property
    def tested(self) -> bool:
        """Whether the row is one of the tests its table's correction counts.

        Not counted: indicative extremes, speed-flagged cells, rows without a
        p-value, and rows whose every value is the same in both versions (no
        slip event, no fall in any block of any unit): their p-value is 1
        whatever the labels, so leaving them out is a label-blind filter that
        keeps the false discovery rate (Bourgon, Gentleman & Huber, PNAS 107,
        2010, 9546-9551, doi:10.1073/pnas.0914005107).
        """
        constant = self.diff == 0.0 and self.low == 0.0 and self.high == 0.0
        return (
            not self.indicative
            and self.speed_flag is None
            and math.isfinite(self.p)
            and not constant
        )

    def to_dict(self) -> dict[str, Any]:
        """JSON shape (NaN becomes None)."""
        out: dict[str, Any] = {}
        for k, v in self.__dict__.items():
            out[k] = None if isinstance(v, float) and not math.isfinite(v) else v
        return out


def verdict_text(row: KpiRow) -> str:
    """The verdict as people read it, with why a call was withheld.

    ``worse``; ``no clear difference (worse before the correction for many
    cells)``; ``no verdict (indicative)``; ``no verdict (speeds differ)``.
    """
    if row.indicative:
        return f"{NO_VERDICT} (indicative)"
    if row.speed_flag:
        return f"{NO_VERDICT} (speeds differ)"
    if row.verdict == NO_CLEAR and row.raw_verdict in (BETTER, WORSE):
        return f"{NO_CLEAR} ({row.raw_verdict} before the correction for many cells)"
    return row.verdict


@dataclass
class KpiTable:
    """Result of :func:`compare_units`: rows overall and per segment, notes and settings."""

    kpis: list[KpiRow]
    segment_kpis: dict[str, list[KpiRow]]
    notes: list[str] = field(default_factory=list)
    settings: dict[str, Any] = field(default_factory=dict)


def _pct(d: Difference) -> float:
    return 100.0 * d.diff / abs(d.a) if np.isfinite(d.a) and d.a != 0 else float("nan")


def _speed(p: Pieces) -> float:
    dist, time = float(np.nansum(p.data["dist"])), float(np.nansum(p.data["time"]))
    return dist / time if time > 0 else float("nan")


def _speed_flag(k: KpiDef, va: float, vb: float, share: float) -> str | None:
    if not k.speed_sensitive or not (math.isfinite(va) and math.isfinite(vb)) or va <= 0:
        return None
    rel = abs(vb - va) / va
    if rel <= share:
        return None
    return (
        f"mean speeds differ by {100 * rel:.0f} % (A {va:.2f} m/s, B {vb:.2f} m/s; more than "
        f"{100 * share:.0f} %): the difference may come from the speed, not the controller"
    )


def _row(
    k: KpiDef, d: Difference, basis: str, va: float, vb: float, share: float, level: float
) -> KpiRow:
    raw = verdict(d.low, d.high, k.better)
    p = float("nan") if k.indicative else d.p  # an indicative extreme is not a test
    flag = None if k.indicative else _speed_flag(k, va, vb, share)
    if k.indicative:
        basis_all = f"{basis}; indicative extreme: rough interval, no verdict"
    elif flag:
        basis_all = f"{basis}; {flag}"
    elif k.speed_sensitive:
        basis_all = f"{basis}; mean speeds within {100 * share:.0f} %"
    else:
        basis_all = basis
    return KpiRow(
        key=k.key, metric=k.metric, channel=k.channel, label=k.label, unit=k.unit,
        better=k.better, a=d.a, b=d.b, diff=d.diff, diff_pct=_pct(d), low=d.low, high=d.high,
        verdict=NO_VERDICT if (k.indicative or flag) else raw, n_blocks=d.n_blocks,
        raw_verdict=NO_VERDICT if k.indicative else raw, p=p, basis=basis_all,
        indicative=k.indicative, speed_a=va, speed_b=vb, speed_flag=flag,
    )  # fmt: skip


def correct(rows: list[KpiRow], level: float) -> list[KpiRow]:
    """Benjamini-Hochberg over the tested rows of one table; verdicts kept only where they survive.

    Parameters
    ----------
    rows : list of KpiRow
        One family of tests (the overall table, or every segment cell).
    level : float
        Confidence level; the false discovery rate is ``1 - level``. [-]

    Returns
    -------
    list of KpiRow
        Same order; ``q`` set on tested rows, ``verdict`` reset to ``no clear
        difference`` where the raw call does not survive.
    """
    alpha = 1.0 - level
    p = np.array([r.p if r.tested else np.nan for r in rows])
    q = bh_adjust(p)
    out = []
    for r, qi in zip(rows, q, strict=True):
        if not r.tested:
            out.append(r)
            continue
        keep = r.raw_verdict in (BETTER, WORSE) and qi <= alpha
        out.append(replace(r, q=float(qi), verdict=r.raw_verdict if keep else NO_CLEAR))
    return out


def _stack(parts: list[dict[str, np.ndarray]], n_blocks: int) -> Pieces:
    return Pieces({k: np.stack([p[k] for p in parts]) for k in parts[0]}, len(parts), n_blocks)


def compare_units(
    units_a: Sequence[ReplicateUnit],
    units_b: Sequence[ReplicateUnit],
    *,
    segments: Sequence[Segment],
    edges: Sequence[np.ndarray],
    owner: np.ndarray,
    paired: bool,
    stretch: tuple[float, float],
    speeds: Sequence[np.ndarray],
    lag: Callable[[ReplicateUnit, float, float], float],
    n_boot: int = N_BOOT,
    seed: int = 0,
    level: float = LEVEL,
    speed_share: float = SPEED_SHARE,
) -> KpiTable:
    """Every KPI of two versions' units, overall and per segment, with corrected verdicts.

    Cuts each unit into its blocks (:func:`analysis.compare.course_kpis.block_pieces`)
    and calls :func:`compare_pieces`.

    Parameters
    ----------
    units_a, units_b : sequence of ReplicateUnit
        Units of each version, all of one kind (runs, or laps).
    segments : sequence of Segment
        Course segments (empty: overall only).
    edges : sequence of ndarray
        Block boundaries of each unit (A units first), on the course when
        ``paired`` (then all equal). [m]
    owner : ndarray of int
        Segment index of each block (when ``paired``).
    paired : bool
        Blocks correspond between all units (same course).
    stretch : (float, float)
        Course stretch of the overall rows (for the roll lag). [m]
    speeds : sequence of ndarray
        Forward speed of each unit's frame samples (A units first). [m/s]
    lag : callable
        ``lag(unit, lo, hi)``: the roll lag of one unit over a stretch, NaN when undefined. [s]
    n_boot, seed, level, speed_share
        See :func:`compare_pieces`.

    Returns
    -------
    KpiTable
    """
    if not units_a or not units_b:
        raise CompareError(
            f"A comparison needs at least one unit of each version, found {len(units_a)} A "
            f"and {len(units_b)} B."
        )
    kinds = {u.kind for u in [*units_a, *units_b]}
    if len(kinds) > 1:
        raise CompareError(f"All units of a comparison must be of one kind, found {sorted(kinds)}.")
    units = [*units_a, *units_b]
    runs = [u.run for u in units]
    kdefs = kpi_definitions(runs, tip_edges(runs))
    n_blocks = int(edges[0].size - 1)
    pieces = [
        block_pieces(u.run, u.position, v, e, kdefs)
        for u, v, e in zip(units, speeds, edges, strict=True)
    ]
    n_a = len(units_a)
    pa, pb = _stack(pieces[:n_a], n_blocks), _stack(pieces[n_a:], n_blocks)

    def lags(version: str, lo: float, hi: float) -> np.ndarray:
        return np.array([lag(u, lo, hi) for u in (units_a if version == "A" else units_b)])

    return compare_pieces(
        kdefs, pa, pb, kind=kinds.pop(), segments=segments, owner=owner, paired=paired,
        stretch=stretch, lags=lags, n_boot=n_boot, seed=seed, level=level,
        speed_share=speed_share,
    )  # fmt: skip


def compare_pieces(
    kdefs: Sequence[KpiDef],
    pieces_a: Pieces,
    pieces_b: Pieces,
    *,
    kind: str,
    segments: Sequence[Segment],
    owner: np.ndarray,
    paired: bool,
    stretch: tuple[float, float],
    lags: Callable[[str, float, float], np.ndarray],
    n_boot: int = N_BOOT,
    seed: int = 0,
    level: float = LEVEL,
    speed_share: float = SPEED_SHARE,
) -> KpiTable:
    """The KPI table from per-unit block pieces: the replicate-unit interface.

    Parameters
    ----------
    kdefs : sequence of KpiDef
        KPIs to compare (:func:`analysis.compare.course_kpis.kpi_definitions`).
    pieces_a, pieces_b : Pieces
        Block pieces of each version, one row per unit (run or lap) on shared
        blocks; must hold ``dist`` and ``time``. With at least two rows on each
        side the verdicts rest on the rows.
    kind : str
        ``"run"`` or ``"lap"``: what a row is (for the words).
    segments : sequence of Segment
        Course segments (empty: overall only).
    owner : ndarray of int
        Segment index of each block.
    paired : bool
        Blocks correspond between the versions (same course).
    stretch : (float, float)
        Course stretch of the overall rows. [m]
    lags : callable
        ``lags(version, lo, hi)`` with version ``"A"`` or ``"B"``: the roll lag of
        each unit of that version over a stretch, NaN where undefined. [s]
    n_boot : int
        Bootstrap replicates (one-unit comparisons and indicative extremes). [-]
    seed : int
        Seed of the bootstrap. [-]
    level : float
        Confidence level; the false discovery rate is ``1 - level``. [-]
    speed_share : float
        See :data:`SPEED_SHARE`. [-]

    Returns
    -------
    KpiTable
    """
    if kind not in UNIT_KINDS:
        raise CompareError(f"Unknown replicate unit {kind!r}; use one of {UNIT_KINDS}.")
    if not speed_share > 0.0:
        raise CompareError(f"The speed share must be > 0, found {speed_share!r}.")
    pa, pb = pieces_a, pieces_b
    n_a, n_b = pa.n_runs, pb.n_runs
    on_units = min(n_a, n_b) >= MIN_UNITS
    basis = basis_text(n_a, n_b, kind)
    rng = np.random.default_rng(seed)

    def diff(k: KpiDef, xa: Pieces, xb: Pieces, lo: float, hi: float, pair: bool) -> Difference:
        if k.stat is None:  # one number per unit (roll lag)
            return welch_difference(lags("A", lo, hi), lags("B", lo, hi), level)
        if on_units and not k.indicative:
            return welch_difference(unit_values(k.stat, xa), unit_values(k.stat, xb), level)
        return bootstrap_difference(k.stat, xa, xb, paired=pair, rng=rng, n_boot=n_boot,
                                    level=level)  # fmt: skip

    lo, hi = stretch
    va, vb = _speed(pa), _speed(pb)
    rows = [_row(k, diff(k, pa, pb, lo, hi, paired), basis, va, vb, speed_share, level)
            for k in kdefs]  # fmt: skip
    seg_rows: dict[str, list[KpiRow]] = {}
    for i, seg in enumerate(segments):
        blocks = np.flatnonzero(owner == i)
        sa, sb = pa.subset(blocks), pb.subset(blocks)
        sva, svb = _speed(sa), _speed(sb)
        seg_rows[seg.name] = [
            _row(k, diff(k, sa, sb, seg.start_m, seg.end_m, True), basis, sva, svb,
                 speed_share, level)
            for k in kdefs
        ]  # fmt: skip
    rows = correct(rows, level)
    flat = correct([r for s in segments for r in seg_rows[s.name]], level)
    width = len(kdefs)
    for j, seg in enumerate(segments):
        seg_rows[seg.name] = flat[j * width : (j + 1) * width]
    notes = _notes(kdefs, rows, flat, n_a, n_b, kind, level, speed_share)
    method = (
        f"{kind}s as units, Welch interval over unit means"
        if on_units
        else "paired course blocks, units pooled (within-run spread only)"
        if paired
        else "independent blocks (within-run spread only)"
    )
    settings = {
        "n_boot": n_boot,
        "seed": seed,
        "level": level,
        "resampling": method,
        "unit": kind,
        "units_a": n_a,
        "units_b": n_b,
        "basis": basis,
        "fdr": "Benjamini-Hochberg, overall table and segment table each one family",
        "fdr_q": round(1.0 - level, 10),
        "speed_share": speed_share,
    }
    return KpiTable(rows, seg_rows, notes, settings)


def _calls(rows: Sequence[KpiRow]) -> tuple[int, int, int]:
    raw = sum(r.tested and r.raw_verdict in (BETTER, WORSE) for r in rows)
    kept = sum(r.tested and r.verdict in (BETTER, WORSE) for r in rows)
    return sum(r.tested for r in rows), raw, kept


def _notes(
    kdefs: Sequence[KpiDef],
    rows: Sequence[KpiRow],
    cells: Sequence[KpiRow],
    n_a: int,
    n_b: int,
    kind: str,
    level: float,
    share: float,
) -> list[str]:
    notes = []
    if min(n_a, n_b) < MIN_UNITS:
        notes.append(
            f"With one {kind} of a version the intervals show the spread within that {kind} "
            f"only: its blocks share one day's conditions and are not independent replicates "
            f"(pseudo-replication, Hurlbert 1984). Differences between {kind}s of one "
            f"controller can look real; compare at least 3 {kind}s per version for a verdict "
            f"that covers the conditions of a test day."
        )
    else:
        notes.append(
            f"The verdicts rest on {basis_text(n_a, n_b, kind)}: each {kind}'s KPI, the "
            f"difference of their means and Welch's interval (Welch 1947)."
        )
    m, raw, kept = _calls(rows)
    sm, sraw, skept = _calls(cells)
    fdr = f"{100 * (1 - level):.0f} %"
    notes.append(
        f"Many cells are tested at once, so calls are corrected for a false discovery rate "
        f"of {fdr} (Benjamini & Hochberg 1995), over the overall table ({m} tests: {kept} "
        f"of {raw} calls survive) and over the segment table ({sm} tests: {skept} of {sraw} "
        f"calls survive)."
    )
    flagged = sum(r.speed_flag is not None for r in [*rows, *cells])
    if flagged:
        notes.append(
            f"{flagged} rows got no verdict because the versions' mean speeds differ by more "
            f"than {100 * share:.0f} % there: tip-over margin, slip and roll error depend on "
            f"the speed driven."
        )
    if any(k.indicative for k in kdefs):
        notes.append(
            "Extremes (peak slip speed, max roll error, minimum tip-over margin) are indicative "
            "only: the bootstrap reproduces the spread of a sample maximum or minimum poorly, "
            "so they get a rough interval and no "
            "verdict; bound them in a gate with a limit such as "
            "peak_slip_speed_increase_max."
        )
    if any(k.stat is None for k in kdefs) and min(n_a, n_b) < MIN_UNITS:
        notes.append(
            f"The roll lag is one number per {kind}; its interval needs at least two {kind}s "
            "of each version."
        )
    return notes
