"""Analysis memory follows the sample count, never the duration (issue 11, item 3).

A run whose last sample lies 98 billion seconds after the others (what one far-off
row made of a 3,000-row log before ingest refused such rows) once made the lag
estimate allocate a 143 TiB grid. Every analysis allocation must be bounded by
the number of samples.
"""

from __future__ import annotations

import math

import numpy as np

from analysis import catalogue as cat
from analysis.demo.logs import demo_profile, simulate_run
from analysis.detect.pipeline import analyse_frame
from analysis.metrics import lag_by_xcorr

FAR_S = 9.8e10  # the stored duration. [s]


def test_lag_estimate_with_one_far_sample_is_refused_not_allocated():
    t = np.arange(3000) / 400.0
    t[-1] = FAR_S
    ref = np.sin(2 * np.pi * 0.5 * t)
    lag = lag_by_xcorr(t, ref, ref, max_lag_s=1.0)
    assert math.isnan(lag.lag_s)
    assert lag.reason is not None and "mostly gaps" in lag.reason


def test_lag_estimate_keeps_working_across_an_ordinary_gap():
    # 2 s of a 0.5 Hz sine, a 1 s pause, 2 s more; y is ref delayed by 0.1 s.
    # Analytic: a pure delay of 0.1 s gives a lag of 0.1 s; tolerance one 400 Hz sample.
    t = np.concatenate((np.arange(800), 1200 + np.arange(800))) / 400.0
    ref = np.sin(2 * np.pi * 0.5 * t)
    y = np.sin(2 * np.pi * 0.5 * (t - 0.1))
    lag = lag_by_xcorr(t, ref, y, max_lag_s=0.5)
    assert abs(lag.lag_s - 0.1) <= 1 / 400


def test_whole_analysis_of_a_run_with_one_far_sample_finishes():
    run = simulate_run("lean-ctl 2.0", seed=0, duration_s=15.0)
    frame = run.frame.copy()
    t = frame[cat.T].to_numpy(dtype=float).copy()
    t[-1] = FAR_S
    frame[cat.T] = t
    result = analyse_frame(frame, demo_profile())
    assert len(result.series) == len(frame)
    assert result.kpis["roll"]["lag_s"] is None
