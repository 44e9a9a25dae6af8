"""Release limits on one run's analysis, for ``outrigger check`` in build pipelines.

A limits file is TOML with keys from :data:`LIMIT_SPECS`, at the top level or in
a ``[limits]`` table. Each key bounds one KPI of the stored analysis. A limit
whose KPI is missing because its detector was skipped counts as broken: a gate
fails closed, and the message says which detector was skipped and why.
"""

from __future__ import annotations

import math
import tomllib
from collections.abc import Callable, Mapping
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from analysis import catalogue as cat
from analysis.errors import ThresholdsError
from analysis.profile import unit_registry

Summary = Mapping[str, Any]
#: A KPI extractor returns (label, value) pairs, or None when its detector did not run.
Extractor = Callable[[Summary, tuple[str, ...]], list[tuple[str, float | None]] | None]


def _detector(summary: Summary, name: str) -> dict[str, Any] | None:
    kpis = summary.get("kpis", {})
    value = kpis.get(name)
    return value if isinstance(value, dict) else None


def _per_actuator(key: str, wheels_only: bool) -> Extractor:
    def extract(summary: Summary, wheels: tuple[str, ...]) -> list[tuple[str, float | None]] | None:
        sat = _detector(summary, "saturation")
        if sat is None:
            return None
        return [
            (name, kpis.get(key))
            for name, kpis in sat.items()
            if isinstance(kpis, dict) and (not wheels_only or name in wheels)
        ]

    return extract


def _slip_events(
    summary: Summary, wheels: tuple[str, ...]
) -> list[tuple[str, float | None]] | None:
    slip = _detector(summary, "slip")
    if slip is None:
        return None
    total = sum(
        int(v.get("event_count") or 0)
        for k, v in slip.items()
        if isinstance(v, dict) and k != "yaw_slip"
    )
    return [("all wheels", float(total))]


def _single(detector: str, key: str, label: str) -> Extractor:
    def extract(summary: Summary, wheels: tuple[str, ...]) -> list[tuple[str, float | None]] | None:
        kpis = _detector(summary, detector)
        if kpis is None:
            return None
        value = kpis.get(key)
        if isinstance(value, bool):
            value = float(value)
        return [(label, value)]

    return extract


def _yaw_slip(summary: Summary, wheels: tuple[str, ...]) -> list[tuple[str, float | None]] | None:
    slip = _detector(summary, "slip")
    if slip is None or not isinstance(slip.get("yaw_slip"), dict):
        return None
    return [("wheels vs gyro", slip["yaw_slip"].get("event_count"))]


@dataclass(frozen=True)
class LimitSpec:
    """One limit key: unit in the file, SI unit of the KPI, bound side, meaning, extractor."""

    key: str
    unit: str
    si_unit: str
    bound: str  # "max": KPI must be <= limit; "min": KPI must be >= limit
    meaning: str
    detector: str
    extract: Extractor


#: Every limit a limits file may set.
LIMIT_SPECS: dict[str, LimitSpec] = {
    s.key: s
    for s in [
        LimitSpec(
            "saturation_share_max",
            "",
            "",
            "max",
            "share of time saturated, any actuator [-]",
            "saturation",
            _per_actuator("saturated_share", wheels_only=False),
        ),
        LimitSpec(
            "wheel_saturation_share_max",
            "",
            "",
            "max",
            "share of time saturated, any wheel [-]",
            "saturation",
            _per_actuator("saturated_share", wheels_only=True),
        ),
        LimitSpec(
            "thermal_ratio_max",
            "",
            "",
            "max",
            "worst sliding-window RMS torque / continuous rating, any actuator [-]",
            "saturation",
            _per_actuator("torque_rms_ratio", wheels_only=False),
        ),
        LimitSpec(
            "slip_events_max",
            "",
            "",
            "max",
            "wheel slip events, both wheels together",
            "slip",
            _slip_events,
        ),
        LimitSpec(
            "yaw_slip_events_max",
            "",
            "",
            "max",
            "wheel-vs-gyro yaw-rate disagreements",
            "slip",
            _yaw_slip,
        ),
        LimitSpec(
            "tip_margin_min",
            "",
            "",
            "min",
            "minimum lateral tip-over margin [-]",
            "tip",
            _single("tip", "min_margin", "minimum tip-over margin"),
        ),
        LimitSpec(
            "tip_time_below_s_max",
            "s",
            "s",
            "max",
            "time with the tip-over margin below its threshold [s]",
            "tip",
            _single("tip", "time_below_s", "time below tip threshold"),
        ),
        LimitSpec(
            "roll_error_rms_deg_max",
            "deg",
            "rad",
            "max",
            "RMS roll tracking error [deg]",
            "roll",
            _single("roll", "rms", "roll error RMS"),
        ),
        LimitSpec(
            "roll_error_peak_deg_max",
            "deg",
            "rad",
            "max",
            "largest |roll tracking error| [deg]",
            "roll",
            _single("roll", "max_abs", "roll error peak"),
        ),
        LimitSpec(
            "roll_lag_s_max",
            "s",
            "s",
            "max",
            "lag of roll behind its reference [s]",
            "roll",
            _single("roll", "lag_s", "roll lag"),
        ),
        LimitSpec(
            "pitch_excursions_max",
            "",
            "",
            "max",
            "pitch excursions beyond the profile limit",
            "balance",
            _single("balance", "excursion_count", "pitch excursions"),
        ),
        LimitSpec(
            "falls_max",
            "",
            "",
            "max",
            "falls (0: no fall allowed)",
            "balance",
            _single("balance", "fall_count", "falls"),
        ),
    ]
}


@dataclass(frozen=True)
class Limits:
    """Limits in SI units, by key of :data:`LIMIT_SPECS`; ``source`` names the file."""

    values: dict[str, float]
    source: str = "limits"


def limits_from_mapping(table: Mapping[str, Any], source: str = "limits") -> Limits:
    """Check a parsed limits table and convert its values to SI."""
    unknown = sorted(set(table) - set(LIMIT_SPECS))
    if unknown:
        raise ThresholdsError(
            f"Unknown limit key(s) {', '.join(unknown)} in {source}. "
            f"Valid keys: {', '.join(LIMIT_SPECS)}."
        )
    if not table:
        raise ThresholdsError(
            f"{source} sets no limit, so a check could never fail. Set at least one of: "
            f"{', '.join(LIMIT_SPECS)}."
        )
    ureg = unit_registry()
    values: dict[str, float] = {}
    for key, raw in table.items():
        spec = LIMIT_SPECS[key]
        if isinstance(raw, bool) or not isinstance(raw, int | float) or not math.isfinite(raw):
            raise ThresholdsError(
                f"Limit {key} in {source} must be a number ({spec.meaning}), found {raw!r}."
            )
        values[key] = (
            float(ureg.Quantity(float(raw), spec.unit).to(spec.si_unit).magnitude)
            if spec.unit
            else float(raw)
        )
    return Limits(values, source)


def load_limits(path: str | Path) -> Limits:
    """Read a limits TOML file; raise :class:`ThresholdsError` on any bad key or value."""
    p = Path(path)
    if not p.is_file():
        raise ThresholdsError(f"The limits file {p} does not exist. Give the path of a TOML file.")
    try:
        data = tomllib.loads(p.read_text(encoding="utf-8"))
    except (tomllib.TOMLDecodeError, UnicodeDecodeError) as exc:
        raise ThresholdsError(f"The limits file {p} is not valid TOML: {exc}.") from exc
    table = data.get("limits", data)
    if not isinstance(table, dict):
        raise ThresholdsError(f"{p}: [limits] must be a table of key = number.")
    return limits_from_mapping(table, str(p))


def _fmt(value: float, spec: LimitSpec) -> str:
    if spec.unit:
        ureg = unit_registry()
        shown = ureg.Quantity(value, spec.si_unit).to(spec.unit).magnitude
        return f"{shown:.4g} {spec.unit}"
    return f"{value:.4g}"


def check_limits(summary: Summary, limits: Limits, wheels: tuple[str, ...] = ()) -> list[str]:
    """Return one plain sentence per broken limit (empty when every limit holds).

    Parameters
    ----------
    summary : mapping
        A stored analysis (``analysis.detect.pipeline.load_analysis``).
    limits : Limits
        From :func:`load_limits`.
    wheels : tuple of str
        Names of the wheel actuators (for ``wheel_saturation_share_max``).
    """
    skipped = {s["detector"]: s["reason"] for s in summary.get("skipped", [])}
    broken: list[str] = []
    for key, limit in limits.values.items():
        spec = LIMIT_SPECS[key]
        found = spec.extract(summary, wheels)
        if found is None:
            why = skipped.get(spec.detector, "it has no stored result")
            broken.append(
                f"{key}: cannot be checked, detector {spec.detector} did not run ({why})."
            )
            continue
        for label, value in found:
            if value is None:
                broken.append(f"{key}: {label} has no value, so the limit cannot be checked.")
            elif spec.bound == "max" and value > limit:
                broken.append(
                    f"{key}: {label} is {_fmt(value, spec)}, above the limit {_fmt(limit, spec)}."
                )
            elif spec.bound == "min" and value < limit:
                broken.append(
                    f"{key}: {label} is {_fmt(value, spec)}, below the limit {_fmt(limit, spec)}."
                )
    return broken


def headline_kpis(summary: Summary) -> dict[str, float | int | None]:
    """The four KPI badges of the runs table.

    Returns ``worst_saturation_share`` [-], ``slip_events``, ``min_tip_margin`` [-]
    and ``roll_error_rms`` [rad]; None where the detector did not run.
    """
    shares = _per_actuator("saturated_share", wheels_only=False)(summary, ())
    slip = _slip_events(summary, ())
    tip = _single("tip", "min_margin", "")(summary, ())
    roll = _single("roll", "rms", "")(summary, ())
    known = [v for _, v in shares or [] if v is not None]
    return {
        "worst_saturation_share": max(known) if known else None,
        "slip_events": int(slip[0][1] or 0) if slip else None,
        "min_tip_margin": tip[0][1] if tip else None,
        "roll_error_rms": roll[0][1] if roll else None,
    }


#: The detector behind each headline KPI.
HEADLINE_DETECTORS = {
    "worst_saturation_share": "saturation",
    "slip_events": "slip",
    "min_tip_margin": "tip",
    "roll_error_rms": "roll",
}

#: The event kinds each detector reports (``catalogue.EVENT_KINDS``).
DETECTOR_KINDS = {
    "saturation": (cat.SATURATION,),
    "slip": (cat.SLIP, cat.YAW_SLIP),
    "tip": (cat.LOW_TIP_MARGIN,),
    "roll": (cat.ROLL_ERROR,),
    "balance": (cat.PITCH_EXCURSION, cat.FALL),
}


def not_run(summary: Summary) -> dict[str, dict[str, str]]:
    """What a stored analysis could not say because a detector was skipped.

    A skipped detector's headline KPI and event counts must read "not run", never
    0 or a blank that looks like a clean result.

    Parameters
    ----------
    summary : mapping
        A stored analysis (``analysis.detect.pipeline.load_analysis``).

    Returns
    -------
    dict
        ``{"detectors": {detector: reason}, "kpis": {headline key: reason},
        "event_kinds": {kind: reason}}``, each empty when every detector ran.
    """
    skipped = {s["detector"]: s["reason"] for s in summary.get("skipped", [])}
    return {
        "detectors": skipped,
        "kpis": {k: skipped[d] for k, d in HEADLINE_DETECTORS.items() if d in skipped},
        "event_kinds": {
            kind: skipped[d]
            for d, kinds in DETECTOR_KINDS.items()
            if d in skipped
            for kind in kinds
        },
    }
