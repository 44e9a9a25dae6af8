"""Day-to-day variation of the demo runs (calibration input)."""

from __future__ import annotations

import pytest

from analysis.demo import course as dc
from analysis.demo.days import FEATURE_SHIFT_M, SPEED_VARIATION, day_variation, slower_roll_loop
from analysis.errors import OutriggerError


def test_varied_course_scales_speeds_and_moves_features() -> None:
    base = dc.course_plan("gullhaven-loop")
    v = dc.varied_course(base, 1.04, [0.5, -0.2, 1.0])
    # Hand arithmetic on the course table: every target speed times 1.04.
    assert [s.speed for s in v.segments] == pytest.approx([s.speed * 1.04 for s in base.segments])
    assert [f.at for f in v.features] == pytest.approx(
        [base.features[0].at + 0.5, max(0.0, base.features[1].at - 0.2), base.features[2].at + 1.0]
    )
    assert v.length == pytest.approx(base.length)  # the course itself is unchanged
    with pytest.raises(OutriggerError, match="speed_scale must lie in"):
        dc.varied_course(base, 2.0)


def test_days_stay_within_the_stated_variation() -> None:
    days = [day_variation(s) for s in range(200)]
    assert all(abs(d.speed_scale - 1) <= SPEED_VARIATION for d in days)
    assert all(abs(x) <= FEATURE_SHIFT_M for d in days for x in d.feature_shift_m)
    # Uniform over +-5 %: 200 days reach both ends' outer tenth (a miss has chance 0.9^200 < 1e-9).
    assert min(d.speed_scale for d in days) < 0.96 and max(d.speed_scale for d in days) > 1.04


def test_slower_roll_loop_is_a_stated_change() -> None:
    ctl = slower_roll_loop(0.2)
    assert ctl.roll_wn == pytest.approx(0.8 * dc.controller_params("lean-ctl 1.4").roll_wn)
    with pytest.raises(OutriggerError, match="share must lie in"):
        slower_roll_loop(1.0)
