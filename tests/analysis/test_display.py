"""Units shown on the page: angles in degrees, factors from pint, everything else unchanged."""

from __future__ import annotations

import math

import numpy as np
import pint
import pytest

from analysis import catalogue as cat
from analysis.display import (
    display_comparison,
    display_detector_kpis,
    display_event_peak,
    display_headline,
    display_kpi_row,
    display_overlay,
    display_unit,
    export_value,
    people,
    scalar_to_display,
    snap_change,
    to_display,
)

#: An independent pint registry: the expected factors never come from the code under test.
UREG = pint.UnitRegistry()


@pytest.mark.parametrize(("si_unit", "shown"), [("rad", "deg"), ("rad/s", "deg/s")])
def test_angles_and_rates_are_shown_in_degrees(si_unit: str, shown: str) -> None:
    unit, factor = display_unit(si_unit)
    assert unit == shown
    # Reference library: pint's own conversion of 1 si_unit to the shown unit.
    expected = UREG.Quantity(1.0, si_unit).to(shown).magnitude
    # Same library and same definition underneath: equal to the last bit is expected,
    # rel 1e-12 only absorbs a different evaluation order.
    assert factor == pytest.approx(expected, rel=1e-12)
    # Definition: 1 rad = 180/pi deg (ISO 80000-3, plane angle).
    assert factor == pytest.approx(180.0 / math.pi, rel=1e-12)


@pytest.mark.parametrize("si_unit", ["m", "m/s", "m/s**2", "N*m", "s", ""])
def test_other_units_pass_unchanged(si_unit: str) -> None:
    assert display_unit(si_unit) == (si_unit, 1.0)
    values = np.array([1.5, -2.0, np.nan])
    shown, unit = to_display(values, si_unit)
    assert unit == si_unit
    assert shown is values  # no copy, no arithmetic


def test_arrays_convert_and_keep_nan() -> None:
    shown, unit = to_display(np.array([math.pi / 2, np.nan, -math.pi]), "rad")
    assert unit == "deg"
    # Definition: pi/2 rad = 90 deg and pi rad = 180 deg; 1e-12 is float round-off.
    np.testing.assert_allclose(shown[[0, 2]], [90.0, -180.0], rtol=1e-12)
    assert np.isnan(shown[1])


def test_scalars_and_missing_values() -> None:
    value, unit = scalar_to_display(0.5, "rad/s")
    # Reference library: pint.
    assert value == pytest.approx(UREG.Quantity(0.5, "rad/s").to("deg/s").magnitude, rel=1e-12)
    assert unit == "deg/s"
    assert scalar_to_display(None, "rad") == (None, "deg")


def test_headline_roll_error_rms_in_degrees_others_unchanged() -> None:
    headline = {
        "worst_saturation_share": 0.25,
        "slip_events": 4,
        "min_tip_margin": 0.3,
        "roll_error_rms": 0.01,
    }
    shown = display_headline(headline)
    assert shown is not None
    assert shown["roll_error_rms"]["unit"] == "deg"
    # Reference library: pint (0.01 rad is about 0.573 deg).
    expected = UREG.Quantity(0.01, "rad").to("deg").magnitude
    assert shown["roll_error_rms"]["value"] == pytest.approx(expected, rel=1e-12)
    # A share of time is read in percent: 0.25 is 25 % (pint: dimensionless -> percent).
    assert shown["worst_saturation_share"]["unit"] == "%"
    assert shown["worst_saturation_share"]["value"] == pytest.approx(
        UREG.Quantity(0.25, "").to("percent").magnitude, rel=1e-12
    )
    assert shown["slip_events"] == {"value": 4, "unit": ""}
    assert shown["min_tip_margin"] == {"value": 0.3, "unit": ""}
    assert display_headline(None) is None
    missing = display_headline({"roll_error_rms": None})
    assert missing == {"roll_error_rms": {"value": None, "unit": "deg"}}


def test_event_peaks_follow_their_detail_unit() -> None:
    roll_event = {"kind": cat.ROLL_ERROR, "peak": -0.1, "detail": {"unit": "rad"}}
    shown = display_event_peak(roll_event)
    assert shown["unit"] == "deg"
    # Reference library: pint.
    assert shown["peak"] == pytest.approx(UREG.Quantity(-0.1, "rad").to("deg").magnitude)
    torque_event = {"kind": cat.SATURATION, "peak": 7.5, "detail": {"unit": "N*m"}}
    assert display_event_peak(torque_event) == {"peak": 7.5, "unit": "N*m"}
    assert display_event_peak({"peak": None, "detail": {}}) == {"peak": None, "unit": ""}
    assert display_event_peak({"peak": float("nan"), "detail": {"unit": "rad"}}) == {
        "peak": None,
        "unit": "deg",
    }


@pytest.mark.parametrize(
    ("value", "text"),
    [
        (0.34500000000000064, "0.345"),  # the float noise of the issue
        (0.012345, "0.0123"),
        (12345.6, "12300"),
        (-1.5, "-1.5"),
        (-0.0, "0"),
        (2.1e-05, "2.1e-05"),
        (None, "–"),
        (float("nan"), "–"),
    ],
)
def test_people_read_three_significant_digits(value, text) -> None:
    # Hand-rounded to 3 significant digits (common practice, no source).
    assert people(value) == text


def test_exports_keep_six_significant_digits() -> None:
    data = {"a": 0.34500000000000064, "b": [1 / 3, 2], "c": "x", "d": None, "e": True}
    # By hand: 1/3 to 6 significant digits is 0.333333.
    assert export_value(data) == {"a": 0.345, "b": [0.333333, 2], "c": "x", "d": None, "e": True}


def test_round_off_is_no_change() -> None:
    # 0.1 + 0.2 - 0.3 is 5.55e-17 in IEEE 754 doubles: round-off, not a change.
    assert snap_change(0.1 + 0.2 - 0.3, 0.3, 0.1 + 0.2) == 0.0
    assert snap_change(1e-3, 0.010, 0.011) == 1e-3
    assert snap_change(None, 1.0, 1.0) is None


def test_comparison_rows_are_shown_in_deg_and_percent() -> None:
    roll = {"key": "roll_error_rms", "metric": "roll_error_rms", "unit": "rad", "a": 0.01,
            "b": 0.02, "diff": 0.01, "diff_pct": 100.0, "low": 0.005, "high": None}  # fmt: skip
    share = {"key": "wheel_l.saturation_share", "metric": "saturation_share", "unit": "-",
             "a": 0.0095, "b": 0.0, "diff": -0.0095, "diff_pct": -100.0, "low": -0.01,
             "high": 0.0}  # fmt: skip
    shown = display_comparison({"kpis": [roll, share], "segment_kpis": {"S1": [roll]}})
    r, s = shown["kpis"]
    # Reference library: pint.
    assert r["unit"] == "deg" and r["si_unit"] == "rad"
    assert r["a"] == pytest.approx(UREG.Quantity(0.01, "rad").to("deg").magnitude, rel=1e-12)
    assert r["high"] is None and r["diff_pct"] == 100.0
    assert s["unit"] == "%" and s["a"] == pytest.approx(0.95, rel=1e-12)  # 0.0095 = 0.95 %
    assert shown["segment_kpis"]["S1"][0]["unit"] == "deg"
    assert shown["units"] == "display"
    iae = display_kpi_row({"metric": "roll_error_iae", "unit": "rad*s", "a": 1.0, "b": 1.0,
                           "diff": -3.553e-15, "diff_pct": -1e-13})  # fmt: skip
    assert iae["unit"] == "deg*s" and iae["diff"] == 0.0 and iae["diff_pct"] == 0.0


def test_overlay_traces_and_detector_kpis_are_shown_in_degrees() -> None:
    view = {
        "signals": [{"name": "roll_error", "label": "Roll error", "unit": "rad"},
                    {"name": "tip_margin", "label": "Tip", "unit": "-"}],
        "traces": [{"signals": {"roll_error": {"x": [0.0, 1.0], "y": [math.pi, None]},
                                "tip_margin": {"x": [0.0], "y": [0.5]}}}],
    }  # fmt: skip
    shown = display_overlay(view)
    assert shown["signals"][0]["unit"] == "deg" and shown["signals"][1]["unit"] == "-"
    # Definition: pi rad = 180 deg.
    assert shown["traces"][0]["signals"]["roll_error"]["y"] == [pytest.approx(180.0), None]
    assert shown["traces"][0]["signals"]["tip_margin"]["y"] == [0.5]
    kpis = display_detector_kpis(
        {"roll": {"rms": math.pi, "lag_s": 0.1, "method": "x"},
         "saturation": {"wheel_l": {"saturated_share": 0.5, "event_count": 3}}}
    )  # fmt: skip
    assert kpis["roll"]["rms"] == {"value": pytest.approx(180.0), "unit": "deg"}
    assert kpis["roll"]["lag_s"] == {"value": 0.1, "unit": "s"}
    assert kpis["roll"]["method"] == "x"
    assert kpis["saturation"]["wheel_l"]["saturated_share"] == {"value": 50.0, "unit": "%"}
    assert kpis["saturation"]["wheel_l"]["event_count"] == {"value": 3.0, "unit": ""}
