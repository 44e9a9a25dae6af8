"""Distance travelled in parts, and the stream sample the plausibility checks read."""

from __future__ import annotations

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq
import pytest

from analysis.ingest import stream
from analysis.ingest.order import GAP_FACTOR, distance, distance_in_parts


def _trace(seed: int) -> tuple[np.ndarray, np.ndarray]:
    rng = np.random.default_rng(seed)
    t = np.cumsum(rng.uniform(0.0049, 0.0051, 5000))
    t[3000:] += 1.0  # a logging gap of 1 s: never bridged
    v = rng.normal(0.8, 0.5, t.size)
    v[[10, 2999, 4500]] = np.nan
    return t, v


@pytest.mark.parametrize("cuts", [[2500], [1, 2999, 3000, 3001], list(range(7, 5000, 997))])
def test_distance_in_parts_is_the_distance_of_the_whole(cuts):
    t, v = _trace(4)
    period = float(np.median(np.diff(t)))
    parts = [(a, b) for a, b in zip(np.split(t, cuts), np.split(v, cuts), strict=True)]
    whole = distance(t, v)
    # the trapezoid rule by hand (every step shorter than the gap rule, both ends finite)
    d = np.diff(t)
    seg = 0.5 * (np.abs(v[1:]) + np.abs(v[:-1])) * d
    by_hand = float(np.nansum(np.where(d <= GAP_FACTOR * period, seg, 0.0)))
    assert whole == pytest.approx(by_hand, rel=1e-12)
    assert distance_in_parts(parts, period) == pytest.approx(whole, rel=1e-12)


def test_the_sample_of_a_long_stream_keeps_no_row_group_alive(tmp_path, monkeypatch):
    """Every k-th row is copied out: a strided view would hold each decoded row group."""
    monkeypatch.setattr(stream, "PLAUSIBILITY_MAX_ROWS", 1000)
    t = np.arange(10_000) * 0.0025
    path = tmp_path / "s.parquet"
    pq.write_table(pa.table({"t": t, "roll": np.sin(t)}), path, row_group_size=3000)
    held = []
    concatenate = np.concatenate

    def spy(parts, *args, **kwargs):  # the per-row-group parts, just before they are joined
        held.extend(parts)
        return concatenate(parts, *args, **kwargs)

    monkeypatch.setattr(np, "concatenate", spy)
    cols = stream._every_kth_row(path, ["t", "roll"])
    monkeypatch.undo()
    np.testing.assert_array_equal(cols["t"], t[::10])
    np.testing.assert_array_equal(cols["roll"], np.sin(t)[::10])
    assert len(held) == 2 * 4  # two columns, four row groups
    assert all(p.base is None and p.size in (300, 100) for p in held)
