"""Units shown to people: angles in degrees, everything else as stored.

The archive and every analysis function stay SI (rad, rad/s). Test engineers
read angles in degrees, so what the dashboard shows -- chart series, axis
titles, limit lines, event peaks, KPI badges -- goes through this module on the
server. The page does no unit arithmetic. Factors come from the project's pint
registry, never from a hand-written table.
"""

from __future__ import annotations

from collections.abc import Mapping
from functools import lru_cache
from typing import Any

import numpy as np

from analysis import catalogue as cat
from analysis.profile import unit_registry

#: SI unit (as the catalogue spells it) -> unit shown on the page (pint strings).
DISPLAY_UNITS: dict[str, str] = {
    "rad": "deg",
    "rad/s": "deg/s",
}

#: SI unit of each headline KPI (``analysis.detect.limits.headline_kpis``), from the catalogue
#: signal it summarises; '' for ratios and counts.
HEADLINE_SI_UNITS: dict[str, str] = {
    "worst_saturation_share": "",
    "slip_events": "",
    "min_tip_margin": cat.DERIVED_SIGNALS[cat.TIP_MARGIN].unit,
    "roll_error_rms": cat.DERIVED_SIGNALS[cat.ROLL_ERROR].unit,
}


@lru_cache(maxsize=64)
def display_unit(si_unit: str) -> tuple[str, float]:
    """The unit a value is shown in, and the factor from its SI unit.

    Parameters
    ----------
    si_unit : str
        Unit as stored, a pint string from the catalogue (``'rad'``, ``'rad/s'``,
        ``'m/s**2'``, ``''`` for dimensionless). [-]

    Returns
    -------
    unit : str
        ``'deg'`` for ``'rad'``, ``'deg/s'`` for ``'rad/s'``, otherwise ``si_unit``
        unchanged.
    factor : float
        Multiply an SI value by this to get the shown value; 1.0 when unchanged. [-]

    Notes
    -----
    factor = (1 si_unit).to(unit), converted by pint [1].

    References
    ----------
    [1] pint developers, "Pint: makes units easy", Python package, pint.readthedocs.io.
    """
    shown = DISPLAY_UNITS.get(si_unit)
    if shown is None:
        return si_unit, 1.0
    ureg = unit_registry()
    return shown, float(ureg.Quantity(1.0, si_unit).to(shown).magnitude)


def to_display(values: np.ndarray, si_unit: str) -> tuple[np.ndarray, str]:
    """Values converted to their shown unit (NaN stays NaN).

    Parameters
    ----------
    values : ndarray
        Values in ``si_unit``. [si_unit]
    si_unit : str
        Their SI unit, a pint string. [-]

    Returns
    -------
    values : ndarray
        Float64 values in the shown unit; the input array itself when unchanged. [unit]
    unit : str
        The shown unit (see :func:`display_unit`).
    """
    unit, factor = display_unit(si_unit)
    if factor == 1.0:
        return values, unit
    return np.asarray(values, dtype=np.float64) * factor, unit


def scalar_to_display(value: float | None, si_unit: str) -> tuple[float | None, str]:
    """One value (or None) in its shown unit, and that unit. [unit]"""
    unit, factor = display_unit(si_unit)
    if value is None or isinstance(value, bool):
        return value, unit
    return float(value) * factor, unit


def display_headline(headline: Mapping[str, Any] | None) -> dict[str, dict[str, Any]] | None:
    """The headline KPIs as ``{key: {"value": shown value, "unit": shown unit}}``.

    Parameters
    ----------
    headline : mapping, optional
        Output of ``headline_kpis`` (SI; ``roll_error_rms`` in rad); None when not analysed.

    Returns
    -------
    dict or None
        Every key of ``headline``; keys without a known SI unit pass unchanged, unit ''.
    """
    if headline is None:
        return None
    out: dict[str, dict[str, Any]] = {}
    for key, value in headline.items():
        shown, unit = scalar_to_display(value, HEADLINE_SI_UNITS.get(key, ""))
        out[key] = {"value": shown, "unit": unit}
    return out


def display_event_peak(event: Mapping[str, Any]) -> dict[str, Any]:
    """An event's peak in its shown unit: ``{"peak": value or None, "unit": unit}``.

    Parameters
    ----------
    event : mapping
        An event as the analysis stores it; its ``detail["unit"]`` names the SI unit
        of ``peak`` ('' when absent).
    """
    detail = event.get("detail")
    si_unit = detail.get("unit", "") if isinstance(detail, Mapping) else ""
    peak = event.get("peak")
    if peak is not None and not isinstance(peak, bool):
        peak = float(peak)
        if not np.isfinite(peak):
            return {"peak": None, "unit": display_unit(str(si_unit or ""))[0]}
    shown, unit = scalar_to_display(peak, str(si_unit or ""))
    return {"peak": shown, "unit": unit}
