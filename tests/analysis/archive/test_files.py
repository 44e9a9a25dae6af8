"""Parquet helpers of the archive: frames written in parts."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pyarrow.parquet as pq

from analysis import catalogue as cat
from analysis.archive.files import FrameWriter, read_frame


def test_parts_are_split_into_small_row_groups_and_read_back_whole(tmp_path) -> None:
    """A chunked analysis writes its derived series in 10-minute parts; a dashboard zoom
    decodes every row group its window touches, so the parts are split."""
    rate_hz, part_rows = 400.0, 240_000  # 10 minutes at 400 Hz
    rng = np.random.default_rng(3)
    parts = []
    for k in range(2):
        t = (k * part_rows + np.arange(part_rows)) / rate_hz
        parts.append(
            pd.DataFrame({cat.T: t, cat.TIP_MARGIN: rng.normal(size=part_rows), "flag": t > 700})
        )
    path = tmp_path / "series.parquet"
    writer = FrameWriter(path)
    for part in parts:
        writer.write(part)
    writer.close()

    whole = pd.concat(parts, ignore_index=True)
    pd.testing.assert_frame_equal(read_frame(path), whole)
    meta = pq.ParquetFile(path).metadata
    groups = [meta.row_group(i) for i in range(meta.num_row_groups)]
    # 65,536 rows (164 s at 400 Hz) at most per group: each 240,000-row part in four.
    assert [g.num_rows for g in groups] == [65_536, 65_536, 65_536, 43_392] * 2
    spans = [(g.column(0).statistics.min, g.column(0).statistics.max) for g in groups]
    for t0 in (0.0, 160.0, 599.0, 650.0, 1187.0):
        touched = [lo for lo, hi in spans if hi >= t0 and lo <= t0 + 12.0]
        # A 12 s zoom window (10 s and the page's margin) touches one or two groups.
        assert 1 <= len(touched) <= 2
        window = read_frame(path, filters=[(cat.T, ">=", t0), (cat.T, "<=", t0 + 12.0)])
        # 12 s at 2.5 ms: 4,801 samples, both ends included.
        assert len(window) == 4801
