"""The whole analysis on demo runs.

Precision and recall of every detector against the generator's truth, on noisy
logs, are in test_noisy_sensors.py.
"""

from __future__ import annotations

import pytest

from analysis import catalogue as cat
from analysis.demo.logs import demo_profile, simulate_run
from analysis.detect.pipeline import DETECTORS, analyse_frame


@pytest.fixture(scope="module")
def analysed_demo_runs():
    """Both controller versions, two seeds each, plus a run that falls."""
    profile = demo_profile()
    cases = [("lean-ctl 1.4", 0, False), ("lean-ctl 1.4", 1, False)]
    cases += [("lean-ctl 2.0", 0, False), ("lean-ctl 2.0", 1, False), ("lean-ctl 2.0", 3, True)]
    out = []
    for controller, seed, fall in cases:
        run = simulate_run(controller, seed=seed, fall=fall)
        out.append((run, analyse_frame(run.frame, profile)))
    return out


def test_controller_2_0_saturates_less_than_1_4(analysed_demo_runs):
    # The generator gives 2.0 gentler acceleration; an honest consequence must show.
    share = {}
    for run, result in analysed_demo_runs:
        if run.truth and not any(e.kind == cat.FALL for e in run.truth):
            share.setdefault(run.controller, []).append(
                max(k["saturated_share"] for k in result.kpis["saturation"].values())
            )
    assert max(share["lean-ctl 2.0"]) < min(share["lean-ctl 1.4"])


def test_missing_signal_skips_one_detector_with_reason_and_runs_the_rest():
    run = simulate_run("lean-ctl 2.0", seed=0, duration_s=20.0)
    frame = run.frame.drop(columns=[cat.ROLL_REF])
    result = analyse_frame(frame, demo_profile())
    skipped = {s["detector"]: s["reason"] for s in result.skipped}
    assert list(skipped) == ["roll"]
    assert cat.ROLL_REF in skipped["roll"]
    assert {"saturation", "slip", "tip", "balance"} <= set(result.kpis)
    assert cat.ROLL_ERROR not in result.series.columns


def test_series_share_the_frame_time_base_and_use_catalogue_names():
    run = simulate_run("lean-ctl 1.4", seed=0, duration_s=10.0)
    result = analyse_frame(run.frame, demo_profile())
    assert len(result.series) == len(run.frame)
    assert result.series[cat.T].equals(run.frame[cat.T].astype(float))
    for wheel in ("wheel_l", "wheel_r"):
        assert f"{wheel}.{cat.SLIP_SPEED}" in result.series
        assert f"{wheel}.{cat.SATURATED}" in result.series
    assert cat.TIP_MARGIN in result.series
    assert result.version and result.thresholds["roll_band_deg"] == pytest.approx(3.0)


def test_json_shape_of_the_result():
    run = simulate_run("lean-ctl 1.4", seed=0, duration_s=20.0)
    out = analyse_frame(run.frame, demo_profile()).to_json("r1")
    assert set(out) >= {"run", "kpis", "events", "skipped", "thresholds", "analysis_version"}
    assert out["run"] == "r1"
    for e in out["events"]:
        assert set(e) == {"kind", "channel", "start_s", "end_s", "duration_s", "peak", "detail"}
        assert e["kind"] in cat.EVENT_KINDS


def test_every_detector_is_registered_once():
    names = [n for n, _ in DETECTORS]
    assert names == ["saturation", "slip", "tip", "roll", "balance"]
