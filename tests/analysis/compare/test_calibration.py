"""Calibration: runs of one controller driven on different days are not called different.

Small version of ``benchmarks/bench_calibration.py``: six demo runs of lean-ctl 1.4,
each on its own day (target speeds within +-5 %, the step, the wet patch and the
shove each moved by up to +-1 m, own sensor noise), split every way into three
runs against the other three (10 comparisons, about 1,000 tested cells). Every
better/worse call among them is false, since nothing about the controller
differs. Then three runs of the same controller with a roll loop 40 % slower
(a real change: roll error RMS about +110 % at this rate) must still be called worse.
"""

from __future__ import annotations

import itertools

import pytest

from analysis.compare.bootstrap import BETTER, WORSE
from analysis.compare.compare import compare_runs
from analysis.demo.days import day_runs, slower_roll_loop

RATE_HZ = 100.0  # half the demo rate: keeps the test about 10 s on a shared 2-core machine
N_BOOT = 100  # bootstrap only feeds the indicative extremes here, whose intervals are rough anyway
#: Nominal level of the false calls: the false discovery rate of the correction.
NOMINAL = 0.05


@pytest.fixture(scope="module")
def same_controller():
    return day_runs("lean-ctl 1.4", 6, seed=100, state_rate_hz=RATE_HZ)


def _tested(comp):
    return [r for r in comp.kpis + [x for v in comp.segment_kpis.values() for x in v] if r.tested]


def test_same_controller_on_different_days_gives_few_false_calls(same_controller) -> None:
    runs = same_controller
    false_calls = tested = raw_calls = 0
    splits = [c for c in itertools.combinations(range(6), 3) if 0 in c]
    for a in splits:
        b = [i for i in range(6) if i not in a]
        comp = compare_runs([runs[i] for i in a], [runs[i] for i in b], n_boot=N_BOOT)
        rows = _tested(comp)
        assert all(r.basis.startswith("3 runs per version") for r in rows)
        false_calls += sum(r.verdict in (BETTER, WORSE) for r in rows)
        raw_calls += sum(r.raw_verdict in (BETTER, WORSE) for r in rows)
        tested += len(rows)
    assert len(splits) == 10 and tested > 900
    # Benjamini & Hochberg 1995: under no real difference the share of false calls
    # stays at or below the false discovery rate (5 %); uncorrected 95 % intervals
    # alone would allow about 5 % of cells. Both are checked, the corrected one is the
    # claim. Measured 0 of 997 corrected (28 raw) on this machine (regression value).
    assert false_calls / tested <= NOMINAL
    assert raw_calls / tested <= NOMINAL


def test_a_real_controller_change_is_still_found(same_controller) -> None:
    changed = day_runs(slower_roll_loop(0.4), 3, seed=200, state_rate_hz=RATE_HZ)
    comp = compare_runs(same_controller[:3], changed, n_boot=N_BOOT)
    row = comp.kpi("roll_error_rms")
    # A 40 % lower roll-loop natural frequency raises the roll error RMS by about 110 %
    # on the demo loop at 100 Hz (regression value of the generator); 3 runs per version
    # find it (3 of 3 draws of the changed runs when this test was written; a 30 % slower
    # loop, about +65 %, only 1 of 3 at this rate: see the benchmark for power).
    assert row.diff_pct > 60
    assert row.verdict == WORSE
    assert row.basis.startswith("3 runs per version")
