"""Tests of the tracking metrics (analysis.metrics) against closed forms and scipy.signal."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import signal as sps

from analysis.metrics import iae, integrate, ise, itae, lag_by_xcorr, rms, time_where

E0, TAU = 0.1, 0.5  # rad, s


def _decay() -> tuple[np.ndarray, np.ndarray]:
    # 20 time constants: the tail beyond is e0 * exp(-20) ~ 2e-9 of the integral; with
    # dt = tau/1000 the trapezoid error is ~ dt^2 / (12 tau^2) ~ 1e-7 relative.
    t = np.arange(0.0, 20 * TAU, TAU / 1000)
    return t, E0 * np.exp(-t / TAU)


def test_iae_of_exponential_decay() -> None:
    t, e = _decay()
    # Closed form: integral of e0 exp(-t/tau) = e0 tau (IAE as in Dorf & Bishop); tolerance
    # covers the trapezoid and truncation errors above.
    assert iae(t, e) == pytest.approx(E0 * TAU, rel=1e-5)
    # Sign does not matter for IAE.
    assert iae(t, -e) == pytest.approx(E0 * TAU, rel=1e-5)


def test_ise_of_exponential_decay() -> None:
    t, e = _decay()
    # Closed form: integral of e0^2 exp(-2t/tau) = e0^2 tau / 2 (ISE, Dorf & Bishop)
    assert ise(t, e) == pytest.approx(E0**2 * TAU / 2, rel=1e-5)


def test_itae_of_exponential_decay() -> None:
    t, e = _decay()
    # Closed form: integral of t e0 exp(-t/tau) = e0 tau^2 (ITAE, Dorf & Bishop); the
    # truncated tail (T tau + tau^2) e^{-T/tau} is ~ 4e-8 relative.
    assert itae(t, e) == pytest.approx(E0 * TAU**2, rel=1e-5)


def test_itae_counts_time_from_the_first_sample() -> None:
    t, e = _decay()
    # ITAE weighs the error by the time since the log started (Dorf & Bishop define it
    # from the step at t = 0): a log whose clock starts at 5 s must give the same e0 tau^2.
    assert itae(t + 5.0, e) == pytest.approx(E0 * TAU**2, rel=1e-5)


def test_rms_of_a_sine() -> None:
    t = np.linspace(0.0, 10.0, 10_001)  # exactly 10 whole periods of 1 Hz
    # RMS of a sine of amplitude A is A / sqrt(2) (from memory); 1e-6 is trapezoid error.
    assert rms(t, 0.3 * np.sin(2 * np.pi * t)) == pytest.approx(0.3 / np.sqrt(2), rel=1e-6)


def test_integrals_skip_nan_and_data_gaps() -> None:
    t = np.concatenate((np.arange(0.0, 1.0 + 1e-9, 0.01), np.arange(3.0, 4.0 + 1e-9, 0.01)))
    ones = np.ones(t.size)
    # Logged time is 1 s + 1 s; the 2 s hole is not counted (gap rule, common practice).
    assert integrate(t, ones) == pytest.approx(2.0, rel=1e-9)
    ones[10] = np.nan  # drops the two intervals touching sample 10
    assert integrate(t, ones) == pytest.approx(1.98, rel=1e-9)
    assert rms(t, ones) == pytest.approx(1.0)


def test_time_where_on_a_known_pattern() -> None:
    t = np.arange(0.0, 10.0 + 1e-9, 0.01)
    inside = t < 6.0
    # 6 s of 10: each sample stands for its half-intervals, so the split lies half a
    # sample from 6 s (tolerance dt).
    seconds, share = time_where(t, inside, np.ones(t.size, dtype=bool))
    assert seconds == pytest.approx(6.0, abs=0.01) and share == pytest.approx(0.6, abs=0.001)


def _multisine(t: np.ndarray) -> np.ndarray:
    return (np.sin(2 * np.pi * 0.31 * t) + 0.6 * np.sin(2 * np.pi * 0.73 * t + 1.0)) + 0.3 * np.sin(
        2 * np.pi * 1.9 * t + 2.0
    )


def test_lag_of_a_delayed_signal() -> None:
    t = np.arange(0.0, 30.0, 0.01)
    delay = 0.137  # s, not a whole number of samples
    est = lag_by_xcorr(t, _multisine(t), _multisine(t - delay), max_lag_s=1.0)
    # Known delay; parabolic refinement brings it to a fraction of dt = 10 ms: 2 ms.
    assert est.lag_s == pytest.approx(delay, abs=2e-3)
    assert not est.at_bound and est.correlation > 0.99
    # The other way round it is a lead.
    lead = lag_by_xcorr(t, _multisine(t - delay), _multisine(t), max_lag_s=1.0)
    assert lead.lag_s == pytest.approx(-delay, abs=2e-3)


def test_lag_on_uneven_time_with_a_gap() -> None:
    rng = np.random.default_rng(3)
    t = np.cumsum(rng.uniform(0.008, 0.012, 3000))
    t = np.where(t > 12.0, t + 5.0, t)  # a 5 s data gap
    delay = 0.25
    est = lag_by_xcorr(t, _multisine(t), _multisine(t - delay), max_lag_s=1.0)
    # Interpolated onto a uniform 10 ms grid (linear interpolation error ~ 1e-3 of the
    # signal); 3 ms is a third of a grid step.
    assert est.lag_s == pytest.approx(delay, abs=3e-3)


def test_lag_of_a_first_order_system() -> None:
    tau, freq = 0.2, 0.5  # s, Hz
    w = 2 * np.pi * freq
    t = np.arange(0.0, 40.0, 0.005)
    u = np.sin(w * t)
    _, y, _ = sps.lsim(sps.TransferFunction([1.0], [tau, 1.0]), u, t)
    keep = t > 10 * tau  # let the start-up transient (exp(-t/tau)) die out
    est = lag_by_xcorr(t[keep], u[keep], y[keep], max_lag_s=0.5)
    # First-order frequency response 1/(j w tau + 1): phase -atan(w tau), i.e. a time
    # lag atan(w tau)/w (Dorf & Bishop, frequency response); simulated with
    # scipy.signal.lsim. 2 ms: parabolic refinement on a 5 ms grid.
    assert est.lag_s == pytest.approx(np.arctan(w * tau) / w, abs=2e-3)


def test_lag_reports_bound_and_constant_signal() -> None:
    t = np.arange(0.0, 20.0, 0.01)
    far = lag_by_xcorr(t, _multisine(t), _multisine(t - 0.8), max_lag_s=0.3)
    # A lag beyond the search window peaks at the bound and says so.
    assert far.at_bound
    flat = lag_by_xcorr(t, np.ones(t.size), _multisine(t), max_lag_s=0.3)
    assert np.isnan(flat.lag_s) and flat.reason == "a signal is constant"
