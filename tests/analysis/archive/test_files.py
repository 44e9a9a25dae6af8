"""Parquet helpers of the archive: frames written in parts."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq
import pytest

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


def test_a_background_writer_writes_the_same_file(tmp_path) -> None:
    rng = np.random.default_rng(5)
    parts = [
        pd.DataFrame({cat.T: k * 1000.0 + np.arange(5000) / 400.0, "x": rng.normal(size=5000)})
        for k in range(4)
    ]
    tables = []
    for background in (False, True):
        path = tmp_path / f"bg{background}.parquet"
        writer = FrameWriter(path, background=background)
        for part in parts:
            writer.write(part)
        writer.close()
        tables.append(pq.read_table(path))
    assert tables[1].equals(tables[0])
    assert tables[1].num_rows == 20_000


def test_an_error_in_the_background_reaches_the_caller(tmp_path) -> None:
    writer = FrameWriter(tmp_path / "s.parquet", background=True)
    writer.write(pd.DataFrame({cat.T: [0.0, 1.0], "x": [1.0, 2.0]}))
    writer.write(pd.DataFrame({cat.T: [2.0, 3.0], "x": ["a", "b"]}))  # cannot be cast
    # pyarrow's cast error, raised on the writing thread, reaches the caller's close()
    with pytest.raises(pa.ArrowInvalid, match="as a scalar of type double"):
        writer.close()
