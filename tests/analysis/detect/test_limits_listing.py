"""`outrigger check` lists every limit, held or broken, in the units a person reads."""

from __future__ import annotations

import math

from analysis.detect.limits import evaluate_limits, limits_from_mapping

SUMMARY = {
    "kpis": {
        "saturation": {"wheel_l": {"saturated_share": 0.0095}, "wheel_r": {"saturated_share": 0.0}},
        "roll": {"rms": math.radians(1.5)},
        "balance": {"fall_count": 0},
    },
    "skipped": [{"detector": "tip", "reason": "no accel_y"}],
}


def test_held_and_broken_limits_are_both_listed() -> None:
    limits = limits_from_mapping(
        {
            "wheel_saturation_share_max": 0.005,
            "roll_error_rms_deg_max": 2.0,
            "falls_max": 0,
            "tip_margin_min": 0.2,
        }
    )
    checks = evaluate_limits(SUMMARY, limits, ("wheel_l", "wheel_r"))
    by = {(c.key, c.label): c for c in checks}
    # 0.0095 is 0.95 % against 0.5 %: broken; wheel_r 0 % holds (by hand).
    assert not by[("wheel_saturation_share_max", "wheel_l")].held
    assert "0.95 %, above the limit 0.5 %" in by[("wheel_saturation_share_max", "wheel_l")].message
    assert by[("wheel_saturation_share_max", "wheel_r")].held
    assert "is 0 %, at most 0.5 %" in by[("wheel_saturation_share_max", "wheel_r")].message
    # 1.5 deg RMS (input) against 2 deg: held, shown in deg with 3 significant digits.
    roll = by[("roll_error_rms_deg_max", "roll error RMS")]
    assert roll.held and "is 1.5 deg, at most 2 deg" in roll.message
    assert by[("falls_max", "falls")].held
    # A skipped detector cannot hold a limit (fails closed).
    assert not by[("tip_margin_min", "tip")].held
    assert [c.held for c in checks].count(True) == 3
