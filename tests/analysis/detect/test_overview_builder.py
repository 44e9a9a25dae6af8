"""The chunk-by-chunk overview equals the whole-run one on awkward signals.

``OverviewBuilder`` takes shortcuts (a rectangle of bucket runs for argmin/argmax,
NaN replaced by infinities, NaN runs found from their edges); the reference is
``analysis.overview.build_overview`` on the whole frame, which has none of them.
The signals are built to hit each shortcut's edge: NaN runs across chunk cuts,
buckets of NaN only, infinite values, many equal values, a time base with gaps
and uneven steps, and a short signal (kept whole).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from analysis import catalogue as cat
from analysis.overview import build_overview
from analysis.overview_builder import OverviewBuilder

BUCKETS = 64


def _frames(rows: int, uneven: bool, seed: int) -> tuple[pd.DataFrame, pd.DataFrame]:
    rng = np.random.default_rng(seed)
    dt = np.full(rows - 1, 0.0025)
    if uneven:
        dt *= rng.uniform(0.5, 1.5, dt.size)
    dt[rows // 3] = 0.4  # a time gap
    dt[2 * rows // 3] = 0.05
    t = 100.0 + np.concatenate(([0.0], np.cumsum(dt)))
    smooth = np.sin(t) + 0.01 * rng.standard_normal(rows)
    gappy = smooth.copy()
    long = max(8, rows // 50)  # at the start, short, long across a cut, at the end
    for a, n in ((0, long), (rows // 5, 3), (rows // 2 - 10, long), (rows - long, long)):
        gappy[a : a + n] = np.nan
    sparse = np.full(rows, np.nan)  # NaN in whole buckets, a few samples elsewhere
    sparse[rng.choice(rows, rows // 50, replace=False)] = rng.standard_normal(rows // 50)
    infinite = smooth.copy()
    infinite[rng.choice(rows, rows // 600 + 1, replace=False)] = np.inf
    infinite[rng.choice(rows, rows // 600 + 1, replace=False)] = -np.inf
    infinite[rng.choice(rows, rows // 100 + 1, replace=False)] = np.nan
    stuck = smooth.copy()  # buckets of +inf and NaN only, NaN first
    stuck[rows // 20 : rows // 20 + 3 * rows // BUCKETS] = np.inf
    stuck[rows // 20 : rows // 20 + 3 * rows // BUCKETS : 7] = np.nan
    frame = pd.DataFrame(
        {
            cat.T: t,
            "smooth": smooth,
            "quantised": np.round(smooth * 3.0),  # many equal extremes per bucket
            "gappy": gappy,
            "sparse": sparse,
            "infinite": infinite,
            "stuck": stuck,
            "flag": smooth > 0.5,
            "count": np.arange(rows) % 7,
            "label": np.where(smooth > 0, "up", "down"),  # text: left out
        }
    )
    series = pd.DataFrame({cat.T: t, "derived": np.cos(t), "derived_gappy": gappy[::-1].copy()})
    return frame, series


def _built(frame: pd.DataFrame, series: pd.DataFrame, cuts: list[int]):
    t = frame[cat.T].to_numpy()
    b = OverviewBuilder(float(t[0]), float(t[-1]), float(np.median(np.diff(t))), BUCKETS)
    bounds = [0, *cuts, len(frame)]
    for k, (a, z) in enumerate(zip(bounds[:-1], bounds[1:], strict=True)):
        b.add(frame.iloc[a:z].reset_index(drop=True), "frame")
        if k == 0:
            b.freeze_frame_names()
        b.add(series.iloc[a:z].reset_index(drop=True), "derived")
    return b.finish()


@pytest.mark.parametrize(
    ("rows", "uneven", "cuts"),
    [
        # cuts inside NaN runs and at the end of one (10_390)
        (20_000, False, [1, 5_003, 9_990, 10_000, 10_390, 14_321]),
        (20_000, True, [37, 7_777, 19_999]),
        (90, False, [30, 31]),  # fewer samples than 2 buckets: kept whole
    ],
)
def test_overview_in_pieces_equals_whole_run(rows, uneven, cuts):
    frame, series = _frames(rows, uneven, seed=rows + len(cuts))
    ref = build_overview(frame, series, buckets=BUCKETS)
    got = _built(frame, series, cuts)
    assert list(got.signals) == list(ref.signals)
    assert "label" not in got.signals
    assert got.spans == ref.spans
    for name, sig in ref.signals.items():
        mine = got.signals[name]
        assert (mine.source, mine.samples) == (sig.source, sig.samples), name
        np.testing.assert_array_equal(mine.t, sig.t, err_msg=name)
        np.testing.assert_array_equal(mine.y, sig.y, err_msg=name)
    # the reference itself has what the test is about: breaks and infinite extremes
    assert np.isnan(ref.signals["gappy"].y).sum() > np.isnan(ref.signals["smooth"].y).sum()
    if rows > 2 * BUCKETS:
        assert np.isinf(ref.signals["infinite"].y).any()
