"""The chart overview of a stored run built a window at a time (a run stored before
overviews existed, or whose overview is stale): the same as from the whole run."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from analysis.archive import overview_store
from analysis.archive.overview_store import build_overview_in_windows
from analysis.archive.store import Archive
from analysis.overview import build_overview
from tests.server.dashboard_fixtures import Stocked, spy_load_frame


@pytest.mark.parametrize("window_rows", [None, 997, 4099])
@pytest.mark.parametrize("cuts", ["footer", "times"])
@pytest.mark.parametrize("which", ["demo", "planted"])
def test_overview_in_windows_equals_the_whole_run(
    grouped: Stocked,
    monkeypatch: pytest.MonkeyPatch,
    window_rows: int | None,
    cuts: str,
    which: str,
) -> None:
    run_id = grouped.demo_id if which == "demo" else grouped.planted_id
    archive = Archive(grouped.root)
    whole = archive.load_frame(run_id)
    ref = build_overview(whole, archive.read_result_series(run_id))
    if window_rows is not None:
        monkeypatch.setattr(overview_store, "BUILD_WINDOW_ROWS", window_rows)
    if cuts == "times":  # as in an object store: no footer statistics at hand
        monkeypatch.setattr(Archive, "row_group_starts", lambda self, run_id: None)
    reads = spy_load_frame(monkeypatch)
    got = build_overview_in_windows(archive, run_id)
    assert list(got.signals) == list(ref.signals) and len(ref.signals) > 10
    assert got.spans == ref.spans and got.buckets == ref.buckets
    for name, sig in ref.signals.items():
        mine = got.signals[name]
        assert (mine.source, mine.samples) == (sig.source, sig.samples), name
        np.testing.assert_array_equal(mine.t, sig.t, err_msg=name)
        np.testing.assert_array_equal(mine.y, sig.y, err_msg=name)
    # the reference has what the test is about: both sources, and the planted run's hole
    assert {s.source for s in ref.signals.values()} == {"frame", "derived"}
    if which == "planted":
        assert np.isnan(ref.signals["roll"].y).any()
    # every column read a window at a time (the time axis alone read whole)
    data = [(t0, t1) for cols, t0, t1 in reads if cols is None]
    assert (len(data) > 1) == (window_rows is not None and window_rows < len(whole) // 2)
    if len(data) > 1:
        assert data[0][0] is None and data[-1][1] is None
        assert all(a[1] < b[0] for a, b in zip(data, data[1:], strict=False))


class _InMemory:
    """A run source over frames in memory: every read is a slice of them."""

    root = None

    def __init__(self, frame: pd.DataFrame, series: pd.DataFrame) -> None:
        self.frame, self.series = frame, series

    def series_location(self, run_id: str) -> str:
        return "in memory"

    def get_meta(self, run_id: str) -> dict[str, object]:
        return {}

    def _cut(self, table, columns, t0, t1) -> pd.DataFrame:  # noqa: ANN001
        t = table["t"].to_numpy()
        keep = np.ones(t.size, dtype=bool)
        if t0 is not None:
            keep &= t >= t0
        if t1 is not None:
            keep &= t <= t1
        cols = list(table.columns) if columns is None else ["t", *columns]
        return table.loc[keep, cols].reset_index(drop=True)

    def load_frame(self, run_id, columns=None, t0=None, t1=None, cache=None):  # noqa: ANN001, ANN201
        return self._cut(self.frame, columns, t0, t1)

    def read_result_series(self, run_id, columns=None, t0=None, t1=None, cache=None):  # noqa: ANN001, ANN201
        return self._cut(self.series, columns, t0, t1)

    def windows(self, run_id, rows, t0=None, t1=None, times=None):  # noqa: ANN001, ANN201
        return Archive.windows(self, run_id, rows, t0, t1, times)  # type: ignore[arg-type]

    def row_group_starts(self, run_id: str) -> None:
        return None


def test_overview_in_windows_keeps_the_whole_runs_median_step(
    monkeypatch: pytest.MonkeyPatch,
) -> None:
    """Gaps of 7 and 40 median steps (a break needs more than 5, analysis.events), NaN
    runs across window edges: the median step is the whole run's, not a window's."""
    rng = np.random.default_rng(7)
    n = 30_000
    dt = np.full(n - 1, 0.0025)
    dt[:5_000] = 0.01  # a slower first part: the windows' own medians differ
    dt[[9_000, 17_500]] = [7 * 0.0025, 40 * 0.0025]
    t = np.concatenate(([0.0], np.cumsum(dt)))
    y = np.sin(t) + 0.01 * rng.standard_normal(n)
    y[12_000:12_050] = np.nan  # across the cut at 12,012 below
    frame = pd.DataFrame({"t": t, "roll": y, "pitch": np.cos(3 * t)})
    series = pd.DataFrame({"t": t, "tip_margin": 1.0 + np.sin(0.1 * t)})
    ref = build_overview(frame, series)
    assert np.isnan(ref.signals["pitch"].y).sum() == 2  # both gaps are breaks
    monkeypatch.setattr(overview_store, "BUILD_WINDOW_ROWS", 4_004)
    got = build_overview_in_windows(_InMemory(frame, series), "mem")
    assert got.spans == ref.spans and list(got.signals) == list(ref.signals)
    for name, sig in ref.signals.items():
        np.testing.assert_array_equal(got.signals[name].t, sig.t, err_msg=name)
        np.testing.assert_array_equal(got.signals[name].y, sig.y, err_msg=name)
