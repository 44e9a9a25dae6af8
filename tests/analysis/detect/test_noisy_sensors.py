"""Every detector on noisy logs: demo runs measured by the sensor model, scored against truth.

The runs carry attitude-filter noise and drift, gyro noise and bias, vibration, a
lagging velocity estimate, quantised encoders, time stamp jitter and dropped rows
(analysis/demo/sensors.py). The truth comes from the generator's true states by the
README's definitions (analysis/demo/truth.py), which share no code with the
detectors. Thresholds are the README defaults (the demo profile sets none other).
Scoring rules: analysis/demo/quality.py.
"""

from __future__ import annotations

import pytest

from analysis import catalogue as cat
from analysis.demo import quality

#: Target of the issue on detection quality: precision and recall >= 0.95 per kind.
TARGET = 0.95


@pytest.fixture(scope="module")
def results():
    return [quality.run_case(case) for case in quality.short_cases()]


def test_every_event_kind_is_planted(results):
    planted = {e.kind for res in results for e in res.run.truth}
    assert planted == set(cat.EVENT_KINDS)


@pytest.mark.parametrize("kind", list(cat.EVENT_KINDS))
def test_precision_and_recall_per_kind_on_noisy_logs(results, kind):
    s = quality.score(results)[kind]
    assert s.planted > 0
    assert s.precision is not None and s.precision >= TARGET, (
        f"{kind}: precision {s.precision} ({s.matched_detected}/{s.detected}); "
        f"false alarms {s.false_alarms}"
    )
    assert s.recall is not None and s.recall >= TARGET, (
        f"{kind}: recall {s.recall} ({s.matched_planted}/{s.planted}); misses {s.misses}"
    )


def test_no_event_in_noise_only_stretches(results):
    seconds = quality.noise_only_seconds(results)
    # the suite must hold minutes of each kind of quiet driving, or the check says little
    assert seconds["standing"] >= 120.0
    assert seconds["straight"] >= 30.0
    assert seconds["steady curve"] >= 20.0
    found = quality.noise_only_events(results)
    assert found == {"standing": [], "straight": [], "steady curve": []}


def test_noise_only_stretches_come_from_the_true_states():
    # A robot standing for 20 s: one stretch, trimmed by the settling time at each end.
    res = quality.run_case(
        quality.Case("lean-ctl 2.0", 8, course="gullhaven-quiet", stand_s=20.0, duration_s=20.0)
    )
    assert res.stretches == [
        pytest.approx(("standing", quality.SETTLE_S, 20.0 - quality.SETTLE_S), abs=0.01)
    ]


def test_400_hz_logs_keep_the_quality():
    # At 400 Hz an encoder difference steps by twice as much per count and the estimator's
    # noise gives twice as many samples: the slip gate must still see no slip in them.
    cases = [
        quality.Case("lean-ctl 1.4", 0, state_rate_hz=400.0),
        quality.Case(
            "lean-ctl 2.0", 6, course="gullhaven-quiet", stand_s=60.0, duration_s=60.0,
            state_rate_hz=400.0,
        ),
    ]  # fmt: skip
    results = [quality.run_case(c) for c in cases]
    for kind, s in quality.score(results).items():
        if s.planted:
            assert s.precision is not None and s.precision >= TARGET, (kind, s.false_alarms)
            assert s.recall is not None and s.recall >= TARGET, (kind, s.misses)
        else:
            assert s.detected == 0, (kind, s.false_alarms)
    assert quality.noise_only_seconds(results)["standing"] >= 55.0
    assert quality.noise_only_events(results)["standing"] == []
