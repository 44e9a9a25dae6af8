"""Whole-run chart overview: bucket extremes kept exactly, gaps kept as breaks."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from analysis import catalogue as cat
from analysis.errors import OutriggerError
from analysis.overview import (
    DERIVED,
    FRAME,
    bucket_extremes,
    bucket_of,
    build_overview,
    overview_signal,
    time_gaps,
)

RATE_HZ = 100.0


def _long_run() -> tuple[np.ndarray, np.ndarray]:
    """Two hours at 100 Hz of a slow sine with a little ripple (720,000 samples)."""
    t = np.arange(int(2 * 3600 * RATE_HZ)) / RATE_HZ
    y = np.sin(2 * np.pi * t / 600.0) + 0.01 * np.sin(2 * np.pi * 3.0 * t)
    return t, y


def test_a_single_sample_spike_and_dip_of_a_two_hour_run_are_kept_exactly() -> None:
    t, y = _long_run()
    spike_at, dip_at = 123_457, 654_321  # on no regular grid
    y[spike_at], y[dip_at] = 4.25, -3.5
    keep = bucket_extremes(t, y, 4096)
    assert spike_at in keep and dip_at in keep
    assert y[keep].max() == 4.25 and y[keep].min() == -3.5
    # Two points per bucket at most: 4096 buckets keep at most 8192 samples.
    assert keep.size <= 2 * 4096
    # The check can fail: plain decimation to the same number of points loses both.
    step = y.size // (2 * 4096)
    assert y[::step].max() < 1.02 and y[::step].min() > -1.02


def test_each_bucket_keeps_its_min_and_max_as_pandas_finds_them() -> None:
    t, y = _long_run()
    rng = np.random.default_rng(7)
    y = y + rng.normal(0.0, 0.05, y.size)
    buckets = 512
    keep = bucket_extremes(t, y, buckets)
    bucket = bucket_of(t, buckets)
    # Reference: pandas groupby over the same bucket numbers (an independent reduction).
    ref = pd.Series(y).groupby(bucket).agg(["min", "max"])
    kept = pd.Series(y[keep]).groupby(bucket[keep]).agg(["min", "max"])
    pd.testing.assert_frame_equal(kept, ref)
    assert np.all(np.diff(keep) > 0)  # in time order, no sample twice


def test_buckets_are_equal_spans_of_time() -> None:
    t = np.array([0.0, 1.0, 2.5, 5.0, 9.99, 10.0])
    # 4 buckets of 2.5 s over 0..10 s; the last sample belongs to the last bucket.
    np.testing.assert_array_equal(bucket_of(t, 4), [0, 0, 1, 2, 3, 3])


def test_a_short_signal_is_kept_whole() -> None:
    t = np.arange(300) / RATE_HZ
    y = np.cos(t)
    y[17] = np.nan
    keep = bucket_extremes(t, y, 200)
    np.testing.assert_array_equal(keep, np.delete(np.arange(300), 17))


def test_missing_rows_for_five_seconds_leave_one_break_point() -> None:
    t, y = _long_run()
    hole = (t >= 3000.0) & (t < 3005.0)  # 5 s of rows missing
    t, y = t[~hole], y[~hole]
    gaps, median_dt = time_gaps(t)
    sig = overview_signal(FRAME, t, y, gaps, median_dt, 1024)
    nulls = sig.t[np.isnan(sig.y)]
    assert nulls.size == 1
    assert 2999.99 < nulls[0] < 3005.0
    assert sig.samples == y.size
    # No kept sample inside the hole; kept samples on both sides of the break.
    finite = sig.t[~np.isnan(sig.y)]
    assert not np.any((finite > 2999.99) & (finite < 3005.0))
    assert np.any(finite < nulls[0]) and np.any(finite > nulls[0])


def test_a_long_nan_run_breaks_the_line_and_a_short_one_does_not() -> None:
    t, y = _long_run()
    y[100_000:100_500] = np.nan  # 5 s of missing values: a data gap
    y[200_000:200_003] = np.nan  # 3 samples: shorter than 5 periods, bridged
    gaps, median_dt = time_gaps(t)
    sig = overview_signal(DERIVED, t, y, gaps, median_dt, 1024)
    nulls = sig.t[np.isnan(sig.y)]
    assert nulls.size == 1
    assert t[99_999] < nulls[0] < t[100_500]
    assert sig.samples == y.size - 503


def test_build_overview_takes_every_numeric_column_and_derived_series_once() -> None:
    t = np.arange(50) / RATE_HZ
    frame = pd.DataFrame(
        {
            cat.T: t,
            cat.ROLL: np.sin(t),
            "extra.mode": ["drive"] * 50,  # text: charts draw none
            "extra.flag": np.arange(50) % 2 == 0,  # bool: drawn as 0/1
        }
    )
    series = pd.DataFrame({cat.T: t, cat.TIP_MARGIN: np.full(50, 0.8), cat.ROLL: np.zeros(50)})
    ov = build_overview(frame, series, buckets=32)  # 50 samples <= 64: kept whole
    assert set(ov.signals) == {cat.ROLL, "extra.flag", cat.TIP_MARGIN}
    assert ov.signals[cat.ROLL].source == FRAME  # the frame's column, as the endpoint serves it
    np.testing.assert_array_equal(ov.signals[cat.ROLL].y, np.sin(t))
    assert ov.signals[cat.TIP_MARGIN].source == DERIVED
    assert ov.spans == {FRAME: (0.0, 0.49), DERIVED: (0.0, 0.49)}
    np.testing.assert_array_equal(ov.signals["extra.flag"].y, (np.arange(50) % 2 == 0) * 1.0)
    with pytest.raises(OutriggerError, match="at least one time bucket"):
        build_overview(frame, None, buckets=0)
