"""Roll-tracking KPIs through ``detect_roll_tracking`` on negative errors, and the lag (issue 18)."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from analysis import catalogue as cat
from analysis.detect.roll import detect_roll_tracking
from analysis.profile import RobotProfile, Thresholds, profile_from_dict

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


def _frame(t: np.ndarray, ref: np.ndarray, roll: np.ndarray) -> pd.DataFrame:
    return pd.DataFrame({cat.T: t, cat.ROLL_REF: ref, cat.ROLL: roll})


def test_kpis_of_a_negative_exponential_error() -> None:
    tau, e0 = 0.5, 0.1  # s, rad
    t = np.arange(0.0, 10.0, 1e-3)
    # The roll overshoots above a zero reference: e = roll_ref - roll = -e0 exp(-t / tau) < 0,
    # with a small positive bump (+0.02 rad for 0.1 s at 8 s) so max(e) and max|e| differ.
    roll = e0 * np.exp(-t / tau) - np.where((t >= 8.0) & (t < 8.1), 0.02, 0.0)
    res = detect_roll_tracking(_frame(t, np.zeros(t.size), roll), _profile())
    k = res.kpis
    # Largest magnitude is the negative start, |-0.1| (the bump is only +0.02).
    assert k["max_abs"] == pytest.approx(e0, abs=1e-12)
    # Closed forms for e = -e0 exp(-t/tau) (Dorf & Bishop): IAE e0 tau, ISE e0^2 tau / 2,
    # ITAE e0 tau^2, plus the bump. The trapezoid rule gives each of the bump's 100 samples a
    # full 1 ms (half an interval on each side), so it adds 0.02 * 0.1 s to the IAE,
    # 0.02^2 * 0.1 s to the ISE and 0.02 * 0.1 s times the mean sample time 8.0495 s to the
    # ITAE. Tolerance: the trapezoid error on the exponential, e0 tau (dt / tau)^2 / 12 =
    # 1.7e-8 on the IAE (and less on the others); 1e-7 covers it.
    bump = 0.02 * 0.1
    assert k["iae"] == pytest.approx(e0 * tau + bump, abs=1e-7)
    assert k["ise"] == pytest.approx(e0**2 * tau / 2 + 0.02 * bump, abs=1e-7)
    assert k["itae"] == pytest.approx(e0 * tau**2 + 8.0495 * bump, abs=1e-7)
    # RMS = sqrt(ISE / T) by definition, over the logged T = 9.999 s.
    assert k["rms"] == pytest.approx(np.sqrt(k["ise"] / t[-1]), rel=1e-12)
    assert k["rms"] == pytest.approx(np.sqrt((e0**2 * tau / 2 + 0.02 * bump) / t[-1]), rel=1e-5)
    band = np.deg2rad(BAND_DEG)
    # In band where e0 exp(-t/tau) <= band, i.e. from t* = tau ln(e0 / band) on (the bump
    # stays inside the band): share (T - t*) / T with T = 9.999 s. Each sample stands for
    # 1 ms, so the band's edge is placed to within one sample: 1 ms / T = 1e-4.
    t_star = tau * np.log(e0 / band)
    assert k["share_in_band"] == pytest.approx((t[-1] - t_star) / t[-1], abs=1e-4)
    assert k["band"] == pytest.approx(band, rel=1e-12)
    # One event, the negative excursion, whose peak keeps its sign.
    assert k["event_count"] == 1 and len(res.events) == 1
    ev = res.events[0]
    assert ev.peak == pytest.approx(-e0, abs=1e-12)
    # It starts at 0 and ends at the last sample above the exit level 0.8 band:
    # t = tau ln(e0 / (0.8 band)) to within one 1 ms sample.
    assert ev.start_s == 0.0
    assert ev.end_s == pytest.approx(tau * np.log(e0 / (0.8 * band)), abs=1e-3)


def _sines(t: np.ndarray, delay_s: float, extra: float = 0.0) -> tuple[np.ndarray, np.ndarray]:
    """A 0.5 Hz reference and a roll that follows it ``delay_s`` late, plus a 1.5 Hz sine."""
    w = 2 * np.pi * 0.5
    ref = 0.05 * np.sin(w * t)
    roll = 0.05 * np.sin(w * (t - delay_s)) + extra * 0.05 * np.sin(3 * w * t)
    return ref, roll


def test_lag_sign_and_correlation_of_a_delayed_and_a_leading_roll() -> None:
    t = np.arange(0.0, 40.0, 0.005)  # 20 periods of 0.5 Hz at 200 Hz
    late = detect_roll_tracking(_frame(t, *_sines(t, 0.08)), _profile()).kpis
    early = detect_roll_tracking(_frame(t, *_sines(t, -0.06)), _profile()).kpis
    # A pure delay d gives a cross-correlation peak at lag d (Bendat & Piersol, Random Data,
    # cross-correlation of a delayed signal). Both delays are whole 5 ms samples, so the peak
    # lies on a sample and the parabolic refinement through its neighbours, nearly symmetric
    # there, moves it by far less than a sample: 1e-5 s.
    assert late["lag_s"] == pytest.approx(0.08, abs=1e-5)
    assert early["lag_s"] == pytest.approx(-0.06, abs=1e-5)
    # Normalised correlation of a signal with its own delayed copy over the pairs both hold:
    # 1 at the peak (Cauchy-Schwarz equality); 20 whole periods keep the means at 0, so only
    # rounding remains: 1e-9.
    assert late["lag_correlation"] == pytest.approx(1.0, abs=1e-9)
    assert early["lag_correlation"] == pytest.approx(1.0, abs=1e-9)
    assert late["lag_at_bound"] is False and early["lag_at_bound"] is False


def test_lag_correlation_with_an_uncorrelated_part() -> None:
    t = np.arange(0.0, 40.0, 0.005)
    k = detect_roll_tracking(_frame(t, *_sines(t, 0.08, extra=1.0)), _profile()).kpis
    # Roll = delayed reference + an equal-amplitude sine at 3x its frequency, orthogonal to it
    # over whole periods: normalised correlation 1 / sqrt(1 + 1) (Bendat & Piersol,
    # correlation coefficient of a sum of orthogonal parts). The lag is unchanged.
    # Tolerance: over the overlap (40 s less the lag) the cross term of the two sines is at
    # most 1 / (dw T) = 1 / (2 pi * 40) = 4e-3 of their energy, so 1e-2 on the correlation.
    # The cross term tilts the peak too: 2.5 ms, half a 5 ms sample, on the lag.
    assert k["lag_correlation"] == pytest.approx(1 / np.sqrt(2), abs=1e-2)
    assert k["lag_s"] == pytest.approx(0.08, abs=2.5e-3)


def test_a_lag_beyond_the_search_bound_is_flagged() -> None:
    t = np.arange(0.0, 40.0, 0.005)
    th = Thresholds.from_mapping({"roll_band_deg": BAND_DEG, "roll_lag_max_s": 0.05})
    res = detect_roll_tracking(_frame(t, *_sines(t, 0.2)), _profile(), th)
    # The correlation of a 0.2 s delay rises all the way to the 0.05 s bound (a 0.5 Hz sine's
    # correlation grows monotonically toward the delay within a quarter period).
    assert res.kpis["lag_at_bound"] is True
    assert res.kpis["lag_s"] == pytest.approx(0.05, abs=1e-9)
    assert any("search bound" in n for n in res.notes)
