"""The demo truth: its own interval rule, its independence from the detectors, its thresholds."""

from __future__ import annotations

import ast
from pathlib import Path

import numpy as np
import pytest

from analysis import catalogue as cat
from analysis.demo import truth
from analysis.demo.logs import SensorModel, simulate_run
from analysis.profile import Thresholds

TRUTH_FILE = Path(truth.__file__)


def test_truth_imports_no_detector_event_or_kinematics_code():
    tree = ast.parse(TRUTH_FILE.read_text(encoding="utf-8"))
    imported = set()
    for node in ast.walk(tree):
        if isinstance(node, ast.ImportFrom) and node.module:
            imported |= {f"{node.module}.{a.name}" for a in node.names}
        elif isinstance(node, ast.Import):
            imported |= {a.name for a in node.names}
    ours = {name for name in imported if name.startswith("analysis")}
    # only the signal and event names, and the demo robot's own constants
    assert ours == {"analysis.catalogue", "analysis.demo.course"}


def test_definitions_are_the_documented_defaults():
    # The truth spells the README defaults itself; if a default changes, this fails
    # until the truth's definitions are brought along.
    d = truth.DEFINITIONS
    th = Thresholds.defaults()
    for name in (
        "min_duration_s",
        "merge_gap_s",
        "saturation_eps",
        "slip_ratio_on",
        "slip_ratio_off",
        "slip_speed_min",
        "slip_min_ref_speed",
        "yaw_rate_diff_on",
        "yaw_rate_diff_off",
        "tip_margin_on",
        "tip_margin_off",
        "roll_band",
        "pitch_limit",
        "fall_pitch",
        "fall_end_window_s",
    ):
        assert getattr(d, name) == pytest.approx(getattr(th, name)), name


def _t(n: int, dt: float = 0.01) -> np.ndarray:
    return np.arange(n) * dt


def test_spans_start_on_the_on_threshold_and_hold_while_above_off():
    t = _t(10)
    value = np.array([0, 0.15, 0.25, 0.15, 0.12, 0.05, 0, 0, 0, 0])
    # hand-worked: on at 0.2 (sample 2), held while > 0.1 (samples 3, 4), ends at 4
    assert truth.spans(t, value > 0.2, value > 0.1, truth.Definitions(min_duration_s=0.0)) == [
        (pytest.approx(0.02), pytest.approx(0.04))
    ]


def test_spans_merge_close_events_and_drop_short_ones():
    t = _t(100)
    on = np.zeros(100, dtype=bool)
    on[10:20] = True  # 0.10..0.19 s
    on[30:40] = True  # 0.30..0.39 s: 0.11 s after the first ends, inside a 0.25 s merge gap
    on[80:82] = True  # 0.80..0.81 s: 0.01 s long, under a 0.05 s minimum duration
    d = truth.Definitions(merge_gap_s=0.25, min_duration_s=0.05)
    assert truth.spans(t, on, on, d) == [(pytest.approx(0.10), pytest.approx(0.39))]
    # with a shorter merge gap the two stay apart
    d2 = truth.Definitions(merge_gap_s=0.05, min_duration_s=0.05)
    assert len(truth.spans(t, on, on, d2)) == 2


def test_an_event_running_to_the_end_is_closed_at_the_last_sample():
    t = _t(30)
    on = t > 0.149
    assert truth.spans(t, on, on) == [(pytest.approx(0.15), pytest.approx(0.29))]


def test_truth_is_the_same_whatever_the_sensors():
    # The truth is made from the true states: the sensor model must not change it.
    noisy = simulate_run("lean-ctl 1.4", seed=2, duration_s=30.0)
    ideal = simulate_run("lean-ctl 1.4", seed=2, duration_s=30.0, sensors=SensorModel.ideal())
    assert noisy.truth == ideal.truth
    assert {e.kind for e in noisy.truth} >= {cat.SATURATION}
