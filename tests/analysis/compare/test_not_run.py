"""A detector a run's analysis skipped is "not run" in a comparison, never a KPI of 0."""

from __future__ import annotations

from dataclasses import replace

from analysis.compare.compare import compare_runs
from tests.analysis.compare_synth import make_run

REASON = "no pitch: map the attitude estimate's pitch in the channel map"


def test_falls_are_left_out_when_the_balance_detector_did_not_run() -> None:
    a = make_run("a", seed=1)
    b = replace(make_run("b", seed=2), skipped={"balance": REASON})
    full = compare_runs([a], [make_run("b", seed=2)], n_boot=200)
    assert "falls" in [r.key for r in full.kpis]  # both looked for falls: a real 0 vs 0
    comp = compare_runs([a], [b], n_boot=200)
    # B never looked for falls: its "0 falls" would be a clean result it did not earn
    assert "falls" not in [r.key for r in comp.kpis]
    assert comp.not_run == [{"run": "b", "detector": "balance", "reason": REASON}]
    assert comp.to_dict()["not_run"] == comp.not_run
