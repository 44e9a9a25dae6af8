"""Slip on measured signals: the lever arm from the gyro, the speed gate against sensor spikes."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from analysis.detect.slip import detect_slip
from tests.analysis.detect.test_slip import R, _frame, _profile


def _slips(frame: pd.DataFrame):
    return [e for e in detect_slip(frame, _profile()).events if e.kind == "slip"]


def test_pitch_estimate_noise_gives_no_slip_when_the_gyro_gives_the_rate() -> None:
    # 400 Hz, rolling at 0.4 m/s (below the 0.5 m/s ratio floor) while pitching
    t = np.arange(0, 10, 0.0025)
    frame = _frame(v_mid=0.4, pitch_amp=0.05, t=t)
    # The attitude estimate carries 0.2 deg white noise (the upper figure); the gyro
    # rate stays clean. With d/dt of the estimate the lever-arm noise would be
    # 0.0035 rad * 0.3 m / (2 * 2.5 ms) * sqrt(2) ~ 0.3 m/s peaks, over the 0.1 m/s gate.
    frame["pitch"] += np.deg2rad(0.2) * np.random.default_rng(2).standard_normal(t.size)
    assert _slips(frame) == []
    v_contact = detect_slip(frame, _profile()).series["wheel_l.contact_speed"].to_numpy()
    # contact speed stays the true 0.4 m/s: only L cos(pitch) q sees the noise (< 1 mm/s)
    assert np.max(np.abs(v_contact - 0.4)) < 1e-3


def test_single_sample_encoder_spikes_at_standstill_are_no_slip() -> None:
    # 400 Hz standstill; every 0.2 s the left wheel's rate jumps one sample by two counts
    # of a 12-bit encoder differenced over 2.5 ms (2 * 2 pi / 4096 / 0.0025 = 1.23 rad/s,
    # 0.12 m/s at the rim): above the 0.1 m/s gate, but one sample long. The merge gap
    # (0.25 s) would join them into one long event if the gate looked at single samples.
    t = np.arange(0, 5, 0.0025)
    frame = _frame(v_mid=0.0, pitch_amp=0.0, t=t)
    spikes = np.zeros(t.size)
    spikes[::80] = 2 * 2 * np.pi / 4096 / 0.0025
    frame["wheel_l.vel"] += spikes
    assert _slips(frame) == []


def test_a_real_slip_keeps_its_exact_start_and_end_and_peak() -> None:
    t = np.arange(0, 3, 0.0025)
    frame = _frame(v_mid=0.0, pitch_amp=0.0, t=t)
    inside = (t >= 1.0) & (t < 1.3)
    frame.loc[inside, "wheel_l.vel"] += 3.0  # rim 0.3 m/s over still ground for 0.3 s
    (ev,) = _slips(frame)
    # The gate is low-passed, the ratio and series are not: the event covers exactly the
    # samples of the step (first 1.0 s, last 1.2975 s) and its peak is the step's 0.3 m/s.
    assert (ev.start_s, ev.end_s) == pytest.approx((1.0, 1.2975))
    assert ev.peak == pytest.approx(3.0 * R, abs=1e-9)  # 3 rad/s on a 0.1 m wheel: 0.3 m/s
