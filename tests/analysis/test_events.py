"""Tests of the shared event extraction (analysis.events.find_intervals).

Example-based checks of hysteresis, minimum duration, merge gap and data gaps,
then property tests (hypothesis) of the invariants every detector relies on.
"""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from analysis.events import (
    Event,
    data_gaps,
    find_intervals,
    intervals_to_events,
    mask_of_events,
)

DT = 0.01  # s


def _t(n: int) -> np.ndarray:
    return np.arange(n) * DT


# --- examples ------------------------------------------------------------------------


def test_hysteresis_enter_above_on_leave_below_off() -> None:
    v = np.array([0, 0.6, 1.2, 0.8, 0.6, 0.4, 0.8, 0.9, 0.2, 0], dtype=float)
    iv = find_intervals(_t(v.size), v, 1.0, 0.5, min_duration_s=0.0, merge_gap_s=0.0)
    # Held from the sample above off before the trigger until the value drops to off;
    # 0.8-0.9 later never reaches on, so it is no event.
    assert iv == [(1, 4)]


def test_min_duration_and_merge_gap() -> None:
    v = np.zeros(100)
    v[10:13] = 2.0  # 0.02 s long
    v[40:50] = 2.0
    v[55:70] = 2.0  # 0.06 s after the previous one
    iv = find_intervals(_t(100), v, 1.0, 1.0, min_duration_s=0.05, merge_gap_s=0.1)
    assert iv == [(40, 69)]
    iv = find_intervals(_t(100), v, 1.0, 1.0, min_duration_s=0.05, merge_gap_s=0.05)
    assert iv == [(40, 49), (55, 69)]


def test_never_merges_across_a_data_gap() -> None:
    t = np.concatenate((_t(50), 2.0 + _t(50)))
    v = np.full(100, 2.0)
    iv = find_intervals(t, v, 1.0, 1.0, min_duration_s=0.0, merge_gap_s=10.0)
    assert iv == [(0, 49), (50, 99)]


def test_events_carry_peak_and_mask() -> None:
    t = _t(20)
    v = np.zeros(20)
    v[5:9] = [-1.0, -3.0, 2.0, -1.0]
    ev = intervals_to_events(t, v, [(5, 8)], "slip", "wheel_l")
    assert ev[0].peak == -3.0 and ev[0].start_s == pytest.approx(0.05)
    assert mask_of_events(t, ev).sum() == 4


# --- property tests ------------------------------------------------------------------

LEVELS = (-2.0, 0.8, 2.0)  # inactive, held (between off and on), triggering
ON, OFF = 1.5, 0.5


@st.composite
def logs(draw: st.DrawFn) -> tuple[np.ndarray, np.ndarray]:
    """A log of piecewise-constant runs at LEVELS, with optional data gaps and NaN."""
    runs = draw(
        st.lists(
            st.tuples(st.sampled_from(LEVELS), st.integers(1, 30), st.booleans()),
            min_size=1,
            max_size=25,
        )
    )
    values, steps = [], []
    for level, length, gap_before in runs:
        values.extend([level] * length)
        # A data gap (1 s = 100 periods) before this run, never before the first sample.
        steps.extend([1.0 if gap_before else DT] + [DT] * (length - 1))
    steps[0] = 0.0
    return np.cumsum(steps), np.asarray(values, dtype=float)


durations = st.sampled_from([0.0, 0.015, 0.05, 0.105])
merge_gaps = st.sampled_from([0.0, 0.015, 0.05, 0.255])


@settings(max_examples=150, deadline=None)
@given(log=logs(), min_duration_s=durations, merge_gap_s=merge_gaps)
def test_intervals_are_ordered_inside_the_run_and_long_enough(
    log: tuple[np.ndarray, np.ndarray], min_duration_s: float, merge_gap_s: float
) -> None:
    t, v = log
    iv = find_intervals(t, v, ON, OFF, min_duration_s=min_duration_s, merge_gap_s=merge_gap_s)
    for a, b in iv:
        # Inside the run, start before end.
        assert 0 <= a <= b < t.size
        # Minimum duration honoured.
        assert t[b] - t[a] >= min_duration_s - 1e-12
        # Every interval holds a triggering sample (hysteresis entry).
        assert np.nanmax(v[a : b + 1]) > ON
    # No overlap within one kind and channel: strictly ordered, disjoint.
    for (_, b0), (a1, _) in zip(iv, iv[1:], strict=False):
        assert a1 > b0
    events = intervals_to_events(t, v, iv, "slip", "wheel_l")
    assert all(t[0] <= e.start_s <= e.end_s <= t[-1] for e in events)


@settings(max_examples=150, deadline=None)
@given(log=logs(), merge_gap_s=merge_gaps)
def test_no_interval_spans_a_data_gap(
    log: tuple[np.ndarray, np.ndarray], merge_gap_s: float
) -> None:
    t, v = log
    gaps = data_gaps(t)
    # Merging is allowed up to 10 s, far more than any gap: only the gap rule stops it.
    for a, b in find_intervals(t, v, ON, OFF, min_duration_s=0.0, merge_gap_s=10.0 + merge_gap_s):
        assert not gaps[a:b].any()


def _resample_2x(t: np.ndarray, v: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Insert the linear-interpolation midpoint in every interval that is not a data gap."""
    inner = ~data_gaps(t)
    t_mid = 0.5 * (t[:-1] + t[1:])[inner]
    v_mid = 0.5 * (v[:-1] + v[1:])[inner]
    t2 = np.concatenate((t, t_mid))
    order = np.argsort(t2, kind="stable")
    return t2[order], np.concatenate((v, v_mid))[order]


@settings(max_examples=150, deadline=None)
@given(log=logs(), min_duration_s=durations, merge_gap_s=merge_gaps)
def test_events_unchanged_when_resampled_2x(
    log: tuple[np.ndarray, np.ndarray], min_duration_s: float, merge_gap_s: float
) -> None:
    t, v = log
    t2, v2 = _resample_2x(t, v)
    one = [
        (t[a], t[b])
        for a, b in find_intervals(
            t, v, ON, OFF, min_duration_s=min_duration_s, merge_gap_s=merge_gap_s
        )
    ]
    two = [
        (t2[a], t2[b])
        for a, b in find_intervals(
            t2, v2, ON, OFF, min_duration_s=min_duration_s, merge_gap_s=merge_gap_s
        )
    ]
    assert len(one) == len(two)
    # Same events to within a sample period of the original log. (With levels -2, 0.8
    # and 2 around off = 0.5 a midpoint next to an inactive sample is inactive, so runs
    # start and end on the original samples, whose times the 2x log keeps exactly; the
    # duration and merge decisions then see the same numbers.)
    for (s1, e1), (s2, e2) in zip(one, two, strict=True):
        assert abs(s1 - s2) <= DT and abs(e1 - e2) <= DT


@settings(max_examples=100, deadline=None)
@given(
    values=st.lists(
        st.one_of(st.floats(-3.0, 3.0, allow_nan=False), st.just(float("nan"))),
        min_size=1,
        max_size=200,
    )
)
def test_nan_samples_are_never_inside_an_interval(values: list[float]) -> None:
    v = np.asarray(values, dtype=float)
    t = _t(v.size)
    for a, b in find_intervals(t, v, ON, OFF, min_duration_s=0.0, merge_gap_s=0.0):
        # Without merging, an interval is one unbroken run of samples above off.
        assert np.all(v[a : b + 1] > OFF)


def test_event_dict_shape() -> None:
    e = Event("fall", None, 1.0, 2.5, float("nan"), {"reason": ["ended_tilted"]})
    d = e.to_dict()
    assert d["duration_s"] == pytest.approx(1.5) and d["peak"] is None and d["channel"] is None
