"""Tests of the roll-tracking detector (analysis.detect.roll)."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from scipy import signal as sps

from analysis import catalogue as cat
from analysis.detect.roll import (
    ROLL_EXIT_FRACTION,
    centring_lean,
    detect_roll_tracking,
    roll_error,
    steady_turn_lean,
)
from analysis.profile import RobotProfile, Thresholds, profile_from_dict

G = 9.80665  # m/s², standard gravity, ISO 80000-3 (typed here, not imported)
BAND_DEG = 3.0


def _profile() -> RobotProfile:
    wheel = {"peak_torque_nm": 10.0, "continuous_torque_nm": 5.0, "role": "wheel"}
    return profile_from_dict(
        {
            "robot": {
                "name": "Marram-2",
                "wheel_radius_m": 0.1,
                "track_width_m": 0.4,
                "mass_kg": 20.0,
                "wheel_encoder_reference": "leg",
            },
            "com": {"model": "constant", "height_m": 0.5},
            "actuators": {
                "wheel_l": {**wheel, "side": "left"},
                "wheel_r": {**wheel, "side": "right"},
            },
            "thresholds": {"roll_band_deg": BAND_DEG, "min_duration_s": 0.05},
        }
    )


def test_steady_turn_lean_and_centring_lean_agree() -> None:
    v, radius = 3.0, 5.0  # m/s, m, left turn
    # Cossalter, Motorcycle Dynamics: |tan(phi)| = v^2/(g R), leaning into the turn (left
    # side down, negative roll in ISO 8855); rounding only.
    assert steady_turn_lean(v, radius) == pytest.approx(-np.arctan(9.0 / (G * 5.0)), abs=1e-12)
    # The lean that centres the ZMP in that turn (f_y = v^2/R, f_z = g) is the same angle.
    assert centring_lean(v**2 / radius, G) == pytest.approx(steady_turn_lean(v, radius), abs=1e-12)


def test_error_kpis_of_an_exponential_decay() -> None:
    tau, e0 = 0.5, 0.1
    t = np.arange(0.0, 10.0, 1e-3)  # 20 time constants: tail e^-20 negligible
    frame = pd.DataFrame(
        {cat.T: t, cat.ROLL_REF: np.zeros(t.size), cat.ROLL: -e0 * np.exp(-t / tau)}
    )
    res = detect_roll_tracking(frame, _profile())
    k = res.kpis
    # Closed forms of IAE, ISE, ITAE for e = e0 exp(-t/tau) (Dorf & Bishop): e0 tau,
    # e0^2 tau/2, e0 tau^2; trapezoid error with dt = tau/500 is ~ 3e-7 relative.
    assert k["iae"] == pytest.approx(e0 * tau, rel=1e-5)
    assert k["ise"] == pytest.approx(e0**2 * tau / 2, rel=1e-5)
    assert k["itae"] == pytest.approx(e0 * tau**2, rel=1e-5)
    # RMS = sqrt(ISE / T) by definition, with T = 10 s minus one sample.
    assert k["rms"] == pytest.approx(np.sqrt(e0**2 * tau / 2 / t[-1]), rel=1e-5)
    assert k["max_abs"] == pytest.approx(e0)
    # Sign: e = roll_ref - roll is positive when roll is below its reference.
    assert res.series[cat.ROLL_ERROR].iloc[0] == pytest.approx(e0)
    assert roll_error(np.array([0.1]), np.array([0.04])) == pytest.approx([0.06])


def test_share_in_band_and_one_event() -> None:
    t = np.arange(0.0, 10.0 + 1e-9, 0.01)
    band = np.deg2rad(BAND_DEG)
    ref = np.where(t >= 6.0, 2.0 * band, 0.0)  # a step the roll never follows
    frame = pd.DataFrame({cat.T: t, cat.ROLL_REF: ref, cat.ROLL: np.zeros(t.size)})
    res = detect_roll_tracking(frame, _profile())
    # 6 s of 10 in band; each sample stands for half its intervals, so the edge lies
    # within half a sample (tolerance dt / T).
    assert res.kpis["share_in_band"] == pytest.approx(0.6, abs=0.001)
    assert len(res.events) == 1
    ev = res.events[0]
    assert ev.kind == cat.ROLL_ERROR and ev.channel is None
    assert ev.start_s == pytest.approx(6.0) and ev.end_s == pytest.approx(10.0)
    assert ev.peak == pytest.approx(2.0 * band)


def test_event_hysteresis_exit() -> None:
    t = np.arange(0.0, 4.0, 0.01)
    band = np.deg2rad(BAND_DEG)
    # Out of band at 1.2 band for 1 s, then 0.9 band (above the exit fraction) for 1 s,
    # then 0.5 band: one event from 1 s to the last sample above the exit level.
    e = np.select([t < 1.0, t < 2.0, t < 3.0], [0.0, 1.2 * band, 0.9 * band], 0.5 * band)
    assert 0.9 > ROLL_EXIT_FRACTION > 0.5
    frame = pd.DataFrame({cat.T: t, cat.ROLL_REF: e, cat.ROLL: np.zeros(t.size)})
    res = detect_roll_tracking(frame, _profile())
    assert [(ev.start_s, round(ev.end_s, 6)) for ev in res.events] == [(1.0, 2.99)]


def test_lag_of_a_first_order_roll_loop() -> None:
    tau, freq = 0.15, 0.4  # s, Hz
    w = 2 * np.pi * freq
    t = np.arange(0.0, 30.0, 0.005)
    ref = 0.1 * np.sin(w * t)
    _, roll, _ = sps.lsim(sps.TransferFunction([1.0], [tau, 1.0]), ref, t)
    keep = t > 10 * tau  # start-up transient gone
    frame = pd.DataFrame(
        {cat.T: t[keep] - t[keep][0], cat.ROLL_REF: ref[keep], cat.ROLL: roll[keep]}
    )
    res = detect_roll_tracking(frame, _profile())
    # First-order frequency response 1/(j w tau + 1): time lag atan(w tau)/w (Dorf &
    # Bishop), simulated with scipy.signal.lsim; 2 ms is under half the 5 ms grid.
    assert res.kpis["lag_s"] == pytest.approx(np.arctan(w * tau) / w, abs=2e-3)
    assert res.kpis["lag_at_bound"] is False


def test_zmp_lean_series_in_a_steady_turn() -> None:
    t = np.arange(0.0, 3.0, 0.01)
    n = t.size
    v, yaw_rate = 2.0, 0.8  # m/s, rad/s: fallback specific force v * yaw_rate to the left
    frame = pd.DataFrame(
        {
            cat.T: t,
            cat.ROLL_REF: np.full(n, -0.15),
            cat.ROLL: np.full(n, -0.14),
            cat.VEL_X: np.full(n, v),
            cat.YAW_RATE: np.full(n, yaw_rate),
        }
    )
    res = detect_roll_tracking(frame, _profile())
    # Steady turn with R = v / yaw_rate: centring lean -atan(v^2/(g R)) = -atan(v w / g)
    # (Cossalter); the filter keeps a constant (DC gain 1).
    expected = -np.arctan(v * yaw_rate / G)
    assert res.series[cat.ROLL_ZMP_LEAN].to_numpy() == pytest.approx(np.full(n, expected))


def test_nan_gap_and_data_gap() -> None:
    t = np.concatenate((np.arange(0.0, 2.0, 0.01), np.arange(4.0, 6.0, 0.01)))
    band = np.deg2rad(BAND_DEG)
    # Out of band on both sides of the data gap: two events, never one across the gap.
    e = np.where((t > 1.505) & (t < 4.495), 2.0 * band, 0.0)  # edges between samples
    e[20:25] = np.nan
    frame = pd.DataFrame({cat.T: t, cat.ROLL_REF: e, cat.ROLL: np.zeros(t.size)})
    th = Thresholds.from_mapping({"merge_gap_s": 5.0, "roll_band_deg": BAND_DEG})
    res = detect_roll_tracking(frame, _profile(), th)
    assert len(res.events) == 2
    assert res.events[0].end_s < 2.0 and res.events[1].start_s >= 4.0
    # The 2 s hole is not integrated: by hand, trapezoids give 2 band * (0.485 + 0.495) s
    # (half an interval of ramp at each outer edge); 1e-6 is rounding of the time base.
    assert res.kpis["iae"] == pytest.approx(2.0 * band * 0.98, rel=1e-6)


def test_skipped_without_reference() -> None:
    t = np.arange(0.0, 1.0, 0.01)
    res = detect_roll_tracking(pd.DataFrame({cat.T: t, cat.ROLL: np.zeros(t.size)}), _profile())
    assert res.skipped is not None and cat.ROLL_REF in res.skipped
    assert res.events == [] and res.kpis == {}
