"""Units and numbers shown to people: one convention on every page, report and text.

The archive, every analysis function, ``--json`` and ``units=si`` stay SI (rad,
rad/s, shares as fractions). What a person reads -- chart series, axis titles,
limit lines, event peaks, KPI badges and tables, the comparison report, CLI
text and gate messages -- goes through this module: angles in deg, angular
rates in deg/s, shares of time in %, numbers rounded to 3 significant digits
(:func:`people`). Exports (``--json``, CSV) keep full precision rounded to 6
significant digits (:func:`export_value`). The page does no unit arithmetic.
Factors come from the project's pint registry, never from a hand-written table.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from functools import lru_cache
from typing import Any

import numpy as np

from analysis import catalogue as cat
from analysis.profile import unit_registry

#: Pseudo-unit of a share of time (a fraction, stored as [-]); shown in percent.
SHARE = "share"

#: Significant digits of a number a person reads, and of an exported number. [-]
PEOPLE_DIGITS = 3
EXPORT_DIGITS = 6

#: SI unit (as the catalogue spells it) -> unit shown on the page (pint strings).
DISPLAY_UNITS: dict[str, str] = {
    "rad": "deg",
    "rad/s": "deg/s",
    "rad*s": "deg*s",
    "rad**2*s": "deg**2*s",
    "rad*s**2": "deg*s**2",
    SHARE: "%",
}

#: SI unit of each headline KPI (``analysis.detect.limits.headline_kpis``), from the catalogue
#: signal it summarises; '' for ratios and counts.
HEADLINE_SI_UNITS: dict[str, str] = {
    "worst_saturation_share": SHARE,
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
        ``'m/s**2'``, ``''`` for dimensionless, :data:`SHARE` for a share of time). [-]

    Returns
    -------
    unit : str
        ``'deg'`` for ``'rad'``, ``'deg/s'`` for ``'rad/s'``, ``'deg*s'`` for
        ``'rad*s'``, ``'%'`` for a share; otherwise ``si_unit`` unchanged.
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
    if si_unit == SHARE:
        return shown, float(ureg.Quantity(1.0, "").to("percent").magnitude)
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


def _round_sig(value: float, digits: int) -> float:
    if value == 0.0 or not math.isfinite(value):
        return value + 0.0  # turns -0.0 into 0.0
    return float(f"{value:.{digits}g}") + 0.0


def people(value: float | None, digits: int = PEOPLE_DIGITS) -> str:
    """A number as a person reads it: ``digits`` significant digits, '–' when missing.

    Parameters
    ----------
    value : float or None
        The number in its shown unit. [unit]
    digits : int
        Significant digits (3 on pages and in text). [-]

    Returns
    -------
    str
        ``'0.0123'``, ``'12300'``, ``'2.1e-05'`` (below 1e-4 or from 1e6 on); never
        ``'-0'``; ``'–'`` for None or NaN.

    Examples
    --------
    >>> people(0.34500000000000064)
    '0.345'
    """
    if value is None or isinstance(value, bool):
        return "–" if value is None else str(value)
    x = float(value)
    if not math.isfinite(x):
        return "–"
    r = _round_sig(x, digits)
    if r == 0.0 or 1e-4 <= abs(r) < 1e6:
        return np.format_float_positional(r, trim="-")
    return f"{r:.{digits}g}"


def export_value(value: Any, digits: int = EXPORT_DIGITS) -> Any:
    """A value for ``--json`` or CSV: floats rounded to 6 significant digits, recursively.

    Parameters
    ----------
    value : any
        A float, or a dict / list / tuple holding floats; other values pass unchanged.
    digits : int
        Significant digits kept (6: finer than any sensor the project reads). [-]

    Returns
    -------
    any
        The same shape; ``0.34500000000000064`` becomes ``0.345``; NaN and inf unchanged.
    """
    if isinstance(value, bool) or value is None:
        return value
    if isinstance(value, float | np.floating):
        return _round_sig(float(value), digits)
    if isinstance(value, Mapping):
        return {k: export_value(v, digits) for k, v in value.items()}
    if isinstance(value, list | tuple):
        return [export_value(v, digits) for v in value]
    return value


#: A difference smaller than this share of its operands is float round-off, not a change. [-]
ROUND_OFF = 1e-9


def snap_change(diff: float | None, a: float | None, b: float | None) -> float | None:
    """B - A with float round-off (``-3.553e-15`` for equal values) set to exactly 0.

    Parameters
    ----------
    diff : float or None
        The difference as computed. [unit]
    a, b : float or None
        The two values it was computed from. [unit]

    Returns
    -------
    float or None
        0.0 when ``|diff| <= 1e-9 * max(|a|, |b|)``, else ``diff``.
    """
    if diff is None or a is None or b is None:
        return diff
    scale = max(abs(float(a)), abs(float(b)))
    if math.isfinite(diff) and math.isfinite(scale) and abs(diff) <= ROUND_OFF * scale:
        return 0.0
    return diff


def kpi_si_unit(metric: str, unit: str) -> str:
    """The SI unit of a compared KPI for :func:`display_unit` (a share gets :data:`SHARE`)."""
    return SHARE if metric.endswith("_share") else unit


#: Fields of a comparison KPI row that carry a value in the KPI's unit.
KPI_VALUE_FIELDS = ("a", "b", "diff", "low", "high")


def display_kpi_row(row: Mapping[str, Any]) -> dict[str, Any]:
    """One comparison KPI row (``KpiRow.to_dict()``, SI) in its shown unit.

    ``a``, ``b``, ``diff``, ``low``, ``high`` are converted (angles to deg, shares to
    %), ``unit`` becomes the shown unit, ``si_unit`` keeps the stored one, round-off
    in ``diff`` and ``diff_pct`` becomes 0; None stays None.
    """
    out = dict(row)
    si = kpi_si_unit(str(row.get("metric", "")), str(row.get("unit", "")))
    unit, factor = display_unit(si)
    for key in KPI_VALUE_FIELDS:
        v = row.get(key)
        if v is not None and not isinstance(v, bool):
            out[key] = float(v) * factor
    out["diff"] = snap_change(out.get("diff"), out.get("a"), out.get("b"))
    if out.get("diff") == 0.0 and out.get("diff_pct") is not None:
        out["diff_pct"] = 0.0
    out["unit"] = unit
    out["si_unit"] = row.get("unit", "")
    return out


def display_comparison(comparison: Mapping[str, Any]) -> dict[str, Any]:
    """A comparison (``Comparison.to_dict()``, SI) with every KPI row in its shown unit.

    The result says ``"units": "display"``; everything else is unchanged.
    """
    out = dict(comparison)
    out["kpis"] = [display_kpi_row(r) for r in comparison.get("kpis", [])]
    out["segment_kpis"] = {
        seg: [display_kpi_row(r) for r in rows]
        for seg, rows in comparison.get("segment_kpis", {}).items()
    }
    out["units"] = "display"
    return out


def display_overlay(view: Mapping[str, Any]) -> dict[str, Any]:
    """Overlay chart data (``analysis.compare.view.overlay``, SI) in shown units.

    Each signal's ``unit`` becomes the shown one (``si_unit`` keeps the stored one)
    and each trace's ``y`` is converted; positions stay in m.
    """
    out = dict(view)
    factors: dict[str, float] = {}
    signals = []
    for sig in view.get("signals", []):
        unit, factor = display_unit(str(sig.get("unit", "")))
        factors[sig["name"]] = factor
        signals.append({**sig, "unit": unit, "si_unit": sig.get("unit", "")})
    out["signals"] = signals
    traces = []
    for tr in view.get("traces", []):
        per = {}
        for name, data in tr.get("signals", {}).items():
            f = factors.get(name, 1.0)
            ys = data["y"] if f == 1.0 else [None if y is None else y * f for y in data["y"]]
            per[name] = {**data, "y": ys}
        traces.append({**tr, "signals": per})
    out["traces"] = traces
    out["units"] = "display"
    return out


#: SI unit of each KPI a detector stores (``analysis.detect.pipeline`` summary
#: ``kpis``), by its key; keys ending ``_s`` are seconds, keys with ``share`` are shares.
DETECTOR_KPI_UNITS: dict[str, str] = {
    "rms": "rad",
    "max_abs": "rad",
    "band": "rad",
    "iae": "rad*s",
    "ise": "rad**2*s",
    "itae": "rad*s**2",
    "max_abs_pitch": "rad",
    "min_force_angle": "rad",
    "yaw_rate_diff_rms": "rad/s",
    "peak_slip_speed": "m/s",
    "torque_rms_worst": "N*m",
    "continuous_torque": "N*m",
    "accel_cutoff_hz": "Hz",
}


def _kpi_leaf_unit(key: str) -> str:
    if key in DETECTOR_KPI_UNITS:
        return DETECTOR_KPI_UNITS[key]
    if "share" in key:
        return SHARE
    if key.endswith("_s"):
        return "s"
    return ""


def display_detector_kpis(kpis: Mapping[str, Any]) -> dict[str, Any]:
    """A stored analysis' ``kpis`` (SI, nested by detector and channel) for people.

    Every number becomes ``{"value": shown value, "unit": shown unit}`` (angles in
    deg, rates in deg/s, shares in %); other values (text, booleans, None) and
    the nesting stay as they are.
    """
    out: dict[str, Any] = {}
    for key, value in kpis.items():
        if isinstance(value, Mapping):
            out[key] = display_detector_kpis(value)
        elif isinstance(value, int | float) and not isinstance(value, bool):
            shown, unit = scalar_to_display(value, _kpi_leaf_unit(str(key)))
            out[key] = {"value": shown, "unit": unit}
        else:
            out[key] = value
    return out
