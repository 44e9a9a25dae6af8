"""Chart downsampling: budget, spikes kept, gaps kept, full resolution when it fits."""

from __future__ import annotations

import math

import numpy as np
import pytest

from server.downsample import json_times, json_values, reduce_series, select_indices

RATE_HZ = 400.0


def _sine(n: int) -> tuple[np.ndarray, np.ndarray]:
    t = np.arange(n) / RATE_HZ
    return t, np.sin(2 * np.pi * 0.5 * t)


def test_full_resolution_when_the_window_fits_the_budget() -> None:
    t, y = _sine(500)
    reduced = reduce_series(t, y, 2000)
    assert not reduced.downsampled
    assert reduced.n_samples == 500
    np.testing.assert_array_equal(reduced.t, t)
    np.testing.assert_array_equal(reduced.y, y)


def test_budget_is_kept_for_a_long_window() -> None:
    t, y = _sine(200_000)
    reduced = reduce_series(t, y, 1000)
    assert reduced.downsampled
    assert reduced.n_samples == 200_000
    # MinMaxLTTB returns exactly n_out points (first, last and one per bucket).
    assert len(reduced.t) == 1000
    assert np.all(np.diff(reduced.t) > 0)


def test_single_sample_spike_survives_downsampling() -> None:
    t, y = _sine(100_000)
    spike_at = 54_321  # not on any regular grid a naive decimation would pick
    y[spike_at] = 7.5
    reduced = reduce_series(t, y, 500)
    assert reduced.y.max() == 7.5
    assert t[spike_at] in reduced.t
    # The check can fail: plain decimation to the same budget loses the spike.
    step = len(t) // 500
    assert y[::step].max() < 1.01


def test_negative_spike_survives_too() -> None:
    t, y = _sine(100_000)
    y[77_777] = -9.0
    assert reduce_series(t, y, 500).y.min() == -9.0


def test_nan_samples_are_never_selected_and_a_nan_run_becomes_a_break() -> None:
    t, y = _sine(40_000)
    y[10_000:12_000] = np.nan  # 5 s of missing values
    reduced = reduce_series(t, y, 400)
    gap_points = np.flatnonzero(np.isnan(reduced.y))
    assert len(gap_points) == 1
    t_gap = reduced.t[gap_points[0]]
    assert t[9_999] < t_gap < t[12_000]
    finite = ~np.isnan(reduced.y)
    assert not np.any((reduced.t[finite] > t[9_999]) & (reduced.t[finite] < t[12_000]))
    assert reduced.n_samples == 38_000


def test_missing_rows_become_a_break_at_full_resolution() -> None:
    t, y = _sine(1_000)
    keep = np.r_[0:400, 600:1000]  # a 0.5 s hole in the time stamps
    reduced = reduce_series(t[keep], y[keep], 2000)
    assert not reduced.downsampled
    assert np.isnan(reduced.y).sum() == 1
    i = int(np.flatnonzero(np.isnan(reduced.y))[0])
    assert reduced.t[i - 1] == t[399] and reduced.t[i + 1] == t[600]


def test_regular_sampling_has_no_breaks() -> None:
    t, y = _sine(10_000)
    assert not np.isnan(reduce_series(t, y, 300).y).any()


def test_boolean_series_is_drawn_as_zero_and_one() -> None:
    t = np.arange(5000) / RATE_HZ
    flag = np.zeros(5000, dtype=bool)
    flag[2500] = True
    reduced = reduce_series(t, flag.astype(float), 100)
    assert set(np.unique(reduced.y)) == {0.0, 1.0}


def test_select_indices_all_nan() -> None:
    t = np.arange(10, dtype=float)
    assert select_indices(t, np.full(10, np.nan), 5).size == 0


def test_leading_nan_is_never_selected_and_short_nan_runs_do_not_break() -> None:
    t, y = _sine(50_000)
    y[:41] = np.nan  # a filter settling at the start
    y[30_000] = np.nan  # one lost sample: shorter than a gap, the line goes on
    reduced = reduce_series(t, y, 500)
    assert not np.isnan(reduced.y).any()
    assert reduced.n_samples == 50_000 - 42


def test_json_values_rounds_to_significant_digits_and_nulls_gaps() -> None:
    out = json_values(np.array([1.23456789, -0.000123456789, math.nan, math.inf]))
    # 6 significant digits relative to the largest finite magnitude (1.23...): 5 decimals.
    assert out[0] == pytest.approx(1.23457, abs=0)
    assert out[1] == pytest.approx(-0.00012, abs=0)
    assert out[2] is None and out[3] is None


def test_json_times_keep_tenth_of_a_millisecond() -> None:
    assert json_times(np.array([3599.99751234])) == [3599.9975]


def test_time_base_window_keeps_the_gaps_inside_the_slice() -> None:
    from server.downsample import time_base

    t = np.arange(100) / RATE_HZ
    t[40:] += 1.0  # a gap between samples 39 and 40
    t[70:] += 1.0  # and between 69 and 70
    base = time_base(t)
    assert base.gaps.tolist() == [39, 69]
    # A window holds a gap only when both of its samples are inside it.
    assert base.window(0, 40).gaps.tolist() == []
    assert base.window(0, 41).gaps.tolist() == [39]
    assert base.window(39, 71).gaps.tolist() == [0, 30]
    assert base.window(40, 100).gaps.tolist() == [29]
    assert base.window(71, 100).gaps.tolist() == []
    assert base.window(10, 90).median_dt == base.median_dt
