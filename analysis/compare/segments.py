"""Split a course into segments (straight, left curve, right curve) and into blocks.

Segments come from the curvature (heading rate per metre, positive turning
left) of a reference run against distance, or from distance marks the user
stores for the course. Every run compared on that course shares the segment
boundaries, in the reference run's distance.

Blocks are the resampling units of the block bootstrap (Efron & Tibshirani,
1993, Section 8.6): each segment is cut into equal pieces of about a chosen
length, so that every block lies inside exactly one segment and a per-segment
interval can resample that segment's blocks alone.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from analysis.errors import CompareError

STRAIGHT = "straight"
LEFT = "left"
RIGHT = "right"
SEGMENT_KINDS = (STRAIGHT, LEFT, RIGHT)

#: Curvature beyond which a stretch counts as a curve: radius below 25 m. [rad/m]
#: (common practice, no source: test-yard courses for small robots turn on radii
#: of a few metres; 25 m is gentle enough to count as straight driving)
CURVE_MIN = 0.04
#: Segments shorter than this merge into a neighbour. [m]
MIN_SEGMENT_M = 3.0
#: Fewest blocks a segment is cut into, so that each has a bootstrap interval. [-]
MIN_BLOCKS_PER_SEGMENT = 5
#: Default block length of the bootstrap. [m]
#: (common practice, no source: several seconds of driving at walking pace,
#: longer than the correlation time of the balance and roll loops)
BLOCK_M = 5.0


@dataclass(frozen=True)
class Segment:
    """One stretch of the course.

    Attributes
    ----------
    name : str
        Short label, ``S1``, ``S2``, ... in course order.
    kind : str
        ``straight``, ``left`` or ``right`` (from the mean curvature).
    start_m, end_m : float
        Bounds in the reference run's distance. [m]
    """

    name: str
    kind: str
    start_m: float
    end_m: float

    @property
    def length_m(self) -> float:
        """End minus start. [m]"""
        return self.end_m - self.start_m

    def to_dict(self) -> dict[str, object]:
        """JSON shape."""
        return {
            "name": self.name,
            "kind": self.kind,
            "start_m": float(self.start_m),
            "end_m": float(self.end_m),
            "length_m": float(self.length_m),
        }


def _classify(kappa: np.ndarray, curve_min: float) -> np.ndarray:
    """0 straight, 1 left, 2 right, per grid point."""
    return np.where(kappa > curve_min, 1, np.where(kappa < -curve_min, 2, 0))


def _kind_of(mean_kappa: float, curve_min: float) -> str:
    if mean_kappa > curve_min:
        return LEFT
    if mean_kappa < -curve_min:
        return RIGHT
    return STRAIGHT


def segment_course(
    distance: np.ndarray,
    curvature: np.ndarray,
    *,
    start_m: float | None = None,
    end_m: float | None = None,
    curve_min: float = CURVE_MIN,
    min_length_m: float = MIN_SEGMENT_M,
) -> list[Segment]:
    """Split a course into straights and left and right curves.

    Parameters
    ----------
    distance : ndarray
        Increasing distance grid of the reference run. [m]
    curvature : ndarray
        Heading rate per metre on that grid, positive turning left (yaw rate
        against distance). [rad/m]
    start_m, end_m : float, optional
        Stretch to split (default: the whole grid). [m]
    curve_min : float
        A point is in a curve where ``|curvature|`` exceeds this. [rad/m]
    min_length_m : float
        Shorter pieces merge into their longer neighbour. [m]

    Returns
    -------
    list of Segment
        Contiguous, in course order, covering ``[start_m, end_m]``.
    """
    x = np.asarray(distance, dtype=float)
    k = np.asarray(curvature, dtype=float)
    if x.size != k.size or x.size < 2:
        raise CompareError(
            f"Segmenting needs a distance grid and a curvature of the same length >= 2, "
            f"found {x.size} and {k.size}."
        )
    lo = float(x[0]) if start_m is None else float(start_m)
    hi = float(x[-1]) if end_m is None else float(end_m)
    sel = (x >= lo) & (x <= hi)
    x, k = x[sel], k[sel]
    if x.size < 2 or hi - lo <= 0:
        raise CompareError(f"The stretch {lo:.2f} m to {hi:.2f} m is empty; nothing to segment.")
    cls = _classify(k, curve_min)
    change = np.flatnonzero(np.diff(cls) != 0) + 1
    starts = np.concatenate(([0], change))
    bounds = [lo] + [float(0.5 * (x[i - 1] + x[i])) for i in change] + [hi]
    pieces = [[bounds[j], bounds[j + 1], int(cls[starts[j]])] for j in range(len(starts))]
    # Merge the shortest piece below min_length_m into its longer neighbour, repeatedly.
    while len(pieces) > 1:
        lengths = [p[1] - p[0] for p in pieces]
        j = int(np.argmin(lengths))
        if lengths[j] >= min_length_m:
            break
        if j == 0:
            n = 1
        elif j == len(pieces) - 1:
            n = j - 1
        else:
            n = j - 1 if lengths[j - 1] >= lengths[j + 1] else j + 1
        a, b = min(j, n), max(j, n)
        kind = pieces[n][2]
        pieces[a : b + 1] = [[pieces[a][0], pieces[b][1], kind]]
        # Neighbours of equal kind join.
        merged: list[list[float]] = []
        for p in pieces:
            if merged and merged[-1][2] == p[2]:
                merged[-1][1] = p[1]
            else:
                merged.append(list(p))
        pieces = merged
    names = {0: STRAIGHT, 1: LEFT, 2: RIGHT}
    return [
        Segment(f"S{i + 1}", names[int(p[2])], float(p[0]), float(p[1]))
        for i, p in enumerate(pieces)
    ]


def segments_from_marks(
    marks_m: Sequence[float],
    start_m: float,
    end_m: float,
    distance: np.ndarray | None = None,
    curvature: np.ndarray | None = None,
    *,
    curve_min: float = CURVE_MIN,
) -> list[Segment]:
    """Segments between distance marks the user stored for the course.

    Parameters
    ----------
    marks_m : sequence of float
        Boundaries along the reference run's distance; those outside
        ``(start_m, end_m)`` are ignored. [m]
    start_m, end_m : float
        Stretch both runs drove. [m]
    distance, curvature : ndarray, optional
        Reference run's grid [m] and curvature [rad/m]; when given, each
        segment's kind follows its mean curvature, else it is ``straight``.
    curve_min : float
        See :func:`segment_course`. [rad/m]

    Returns
    -------
    list of Segment
    """
    marks = np.asarray(list(marks_m), dtype=float)
    if marks.size and not np.all(np.isfinite(marks)):
        raise CompareError(
            f"Distance marks must be finite numbers of metres, found {list(marks_m)}."
        )
    inner = np.unique(marks[(marks > start_m) & (marks < end_m)])
    edges = np.concatenate(([start_m], inner, [end_m]))
    out = []
    for i in range(edges.size - 1):
        kind = STRAIGHT
        if distance is not None and curvature is not None:
            sel = (distance >= edges[i]) & (distance <= edges[i + 1])
            if sel.any():
                kind = _kind_of(float(np.mean(np.asarray(curvature)[sel])), curve_min)
        out.append(Segment(f"S{i + 1}", kind, float(edges[i]), float(edges[i + 1])))
    return out


def block_edges(
    segments: Sequence[Segment],
    block_m: float = BLOCK_M,
    min_blocks: int = MIN_BLOCKS_PER_SEGMENT,
) -> tuple[np.ndarray, np.ndarray]:
    """Cut every segment into equal blocks of about ``block_m``.

    Parameters
    ----------
    segments : sequence of Segment
        Contiguous segments in course order.
    block_m : float
        Wanted block length. [m]
    min_blocks : int
        Each segment gets at least this many blocks. [-]

    Returns
    -------
    edges : ndarray
        Block boundaries, length ``n_blocks + 1``. [m]
    segment_of_block : ndarray of int
        Index into ``segments`` of each block.
    """
    if block_m <= 0:
        raise CompareError(f"The bootstrap block length must be > 0 m, found {block_m}.")
    edges: list[float] = []
    owner: list[int] = []
    for i, seg in enumerate(segments):
        n = max(min_blocks, int(round(seg.length_m / block_m)))
        e = np.linspace(seg.start_m, seg.end_m, n + 1)
        edges.extend(e[:-1].tolist())
        owner.extend([i] * n)
    if segments:
        edges.append(segments[-1].end_m)
    return np.asarray(edges, dtype=float), np.asarray(owner, dtype=int)
