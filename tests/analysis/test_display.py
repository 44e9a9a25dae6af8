"""Units shown on the page: angles in degrees, factors from pint, everything else unchanged."""

from __future__ import annotations

import math

import numpy as np
import pint
import pytest

from analysis import catalogue as cat
from analysis.display import (
    display_event_peak,
    display_headline,
    display_unit,
    scalar_to_display,
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
    assert shown["worst_saturation_share"] == {"value": 0.25, "unit": ""}
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
