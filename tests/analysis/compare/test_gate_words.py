"""Gate messages: worded by the sign of the change, in the units a person reads."""

from __future__ import annotations

import math

import pint
import pytest

from analysis.compare.compare import Comparison, KpiRow
from analysis.compare.gate import change_words, check_gate, gate_from_mapping

#: An independent pint registry: expected degrees never come from the code under test.
UREG = pint.UnitRegistry()


def _row(
    key: str, metric: str, unit: str, a: float, b: float, verdict: str = "no clear difference"
) -> KpiRow:
    d = b - a
    return KpiRow(
        key=key, metric=metric, channel=key.partition(".")[0] if "." in key else None,
        label=key, unit=unit, better="lower", a=a, b=b, diff=d,
        diff_pct=100 * d / a if a else math.nan, low=d - 1e-4, high=d + 1e-4,
        verdict=verdict, n_blocks=10,
    )  # fmt: skip


def _comparison(*rows: KpiRow) -> Comparison:
    return Comparison(
        runs_a=[], runs_b=[], alignments=[], same_course=True, refusal=None, offsets={},
        stretch=(0.0, 100.0), segments=[], kpis=list(rows), segment_kpis={},
        settings={"level": 0.95},
    )  # fmt: skip


def _deg(x_rad: float) -> str:
    # Reference library: pint (rad -> deg), then 3 significant digits by hand.
    return f"{UREG.Quantity(x_rad, 'rad').to('deg').magnitude:.3g}"


def test_a_fall_says_fell_in_degrees() -> None:
    # The case of the issue: 0.0123 rad -> 0.00773 rad was worded "rose".
    comp = _comparison(_row("roll_error_rms", "roll_error_rms", "rad", 0.0123, 0.00773))
    (check,) = check_gate(comp, gate_from_mapping({"roll_error_rms_increase_max": 0.001}))
    assert not check.broken
    assert f"fell from {_deg(0.0123)} deg to {_deg(0.00773)} deg" in check.message
    assert "0.705 deg" in check.message and "0.443 deg" in check.message  # hand: x*180/pi
    assert "rose" not in check.message and "rad" not in check.message
    # The limit 0.001 rad is shown in deg too: 0.0573 deg (pint).
    assert f"limit {_deg(0.001)} deg" in check.message


def test_a_rise_says_rose_and_a_drop_rule_reads_the_same_words() -> None:
    comp = _comparison(_row("min_tip_margin", "min_tip_margin", "-", 0.40, 0.55))
    (check,) = check_gate(comp, gate_from_mapping({"min_tip_margin_drop_max": 0.05}))
    assert "rose from 0.4 to 0.55" in check.message
    assert not check.broken  # a rise is no drop


def test_equal_values_stay() -> None:
    comp = _comparison(_row("falls", "falls", "count", 0.0, 0.0))
    (check,) = check_gate(comp, gate_from_mapping({"falls_increase_max": 0}))
    assert "falls stayed at 0" in check.message
    assert "rose" not in check.message and "fell" not in check.message
    (falls,) = check_gate(comp, gate_from_mapping({"new_falls_allowed": False}))
    assert "stayed at 0" in falls.message and not falls.broken


def test_shares_are_read_in_percent() -> None:
    row = _row("wheel_l.saturation_share", "saturation_share", "-", 0.0095, 0.0)
    (check,) = check_gate(
        _comparison(row), gate_from_mapping({"saturation_share_increase_max": 0.01})
    )
    # Definition: a share of 0.0095 is 0.95 % (common practice, no source).
    assert "fell from 0.95% to 0%" in check.message
    assert "limit 1%" in check.message


def test_no_worse_message_is_in_shown_units() -> None:
    row = _row("roll_error_rms", "roll_error_rms", "rad", 0.01, 0.01 + 1e-17, verdict="worse")
    (check,) = check_gate(_comparison(row), gate_from_mapping({"no_worse": ["roll_error_rms"]}))
    assert check.broken
    # A float round-off difference is shown as 0, never as 1e-17 or -3.55e-15.
    assert "B - A 0 deg" in check.message
    assert "e-1" not in check.message


@pytest.mark.parametrize(
    ("a", "b", "words"),
    [
        (1.0, 2.0, "x rose from 1 to 2"),
        (2.0, 1.0, "x fell from 2 to 1"),
        (0.0, 0.0, "x stayed at 0"),
        (0.12341, 0.12342, "x stayed at about 0.123"),
    ],
)
def test_change_words(a: float, b: float, words: str) -> None:
    assert change_words("x", a, b) == words
