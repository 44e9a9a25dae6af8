"""What the Run page draws: the stacked timelines, built from catalogue names.

The page never spells a signal name. It asks ``GET /api/runs/{id}/charts`` for
this plan: panels (one strip chart each, all on one time axis), rows inside a
panel (one y axis each), the traces of a row with the catalogue name of the
signal, its unit and a line style, horizontal limit lines with values taken from
the thresholds of the run's last analysis (converted to SI by
``analysis.profile``), and the event kinds shaded on the panel. Only signals the
run actually has are planned; an empty panel says why.

Units are those the page shows (angles in deg and deg/s, by
``analysis.display``): each trace carries its shown ``unit`` and its stored
``si_unit``, and limit lines are given in the shown unit of their row.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

from analysis import catalogue as cat
from analysis.display import display_unit, scalar_to_display
from analysis.profile import RobotProfile, Thresholds

MAIN, SECOND, REF, LIMIT = "main", "second", "ref", "limit"


def unit_of(name: str) -> str:
    """SI unit of a frame column or derived series, '' when dimensionless or unknown."""
    if name in cat.BASE_SIGNALS:
        return cat.BASE_SIGNALS[name].unit
    if name in cat.DERIVED_SIGNALS:
        return cat.DERIVED_SIGNALS[name].unit
    _, _, suffix = name.partition(".")
    if suffix in cat.ACTUATOR_QUANTITIES:
        return cat.ACTUATOR_QUANTITIES[suffix][0]
    if suffix in cat.DERIVED_SIGNALS:
        return cat.DERIVED_SIGNALS[suffix].unit
    if name in (cat.LEG_L_LENGTH, cat.LEG_R_LENGTH):
        return "m"
    return ""


@dataclass
class _Row:
    label: str
    channel: str | None
    traces: list[dict[str, Any]]
    lines: list[dict[str, Any]]

    def to_dict(self) -> dict[str, Any]:
        units = sorted({t["unit"] for t in self.traces if t["unit"]})
        return {
            "label": self.label,
            "channel": self.channel,
            "unit": ", ".join(units),
            "traces": self.traces,
            "lines": self.lines,
        }


def _trace(name: str, label: str, style: str, available: set[str], **extra: Any) -> list[dict]:
    if name not in available:
        return []
    si_unit = unit_of(name)
    shown, _ = display_unit(si_unit)
    return [
        {"signal": name, "label": label, "style": style, "unit": shown, "si_unit": si_unit, **extra}
    ]


def _line(value_si: float, of_signal: str, label: str, mirror: bool) -> dict[str, Any]:
    """A horizontal limit line in the shown unit of the signal it bounds."""
    shown, _ = scalar_to_display(value_si, unit_of(of_signal))
    return {"y": shown, "label": label, "mirror": mirror}


def _row(label: str, channel: str | None, traces: list[list[dict]], lines=()) -> _Row | None:
    flat = [t for group in traces for t in group]
    return _Row(label, channel, flat, list(lines)) if flat else None


def _panel(pid: str, title: str, kinds: list[str], rows: list[_Row | None], why: str) -> dict:
    kept = [r.to_dict() for r in rows if r is not None]
    return {
        "id": pid,
        "title": title,
        "event_kinds": kinds,
        "rows": kept,
        "empty_reason": None if kept else why,
    }


def chart_plan(
    profile: RobotProfile,
    available: set[str],
    thresholds: dict[str, float] | None,
    skipped: dict[str, str],
) -> list[dict[str, Any]]:
    """The five stacked timelines of the Run page.

    Parameters
    ----------
    profile : RobotProfile
        The run's robot (actuator names and roles).
    available : set of str
        Frame columns and derived series the run has.
    thresholds : dict, optional
        Thresholds of the last analysis, as file keys in file units.
    skipped : dict
        Reason by detector name, for detectors that did not run.
    """
    th = Thresholds.from_mapping(thresholds or {}, where="the stored analysis")

    def why(detector: str, signals: str) -> str:
        if detector in skipped:
            return f"Detector '{detector}' was skipped: {skipped[detector]}"
        return f"This run has none of the signals drawn here ({signals})."

    torque_rows = []
    for act in profile.actuators:
        a = act.name
        torque_rows.append(
            _row(
                a,
                a,
                [
                    _trace(cat.actuator_signal(a, cat.TORQUE_CMD), "commanded", MAIN, available),
                    _trace(cat.actuator_signal(a, cat.TORQUE_REQ), "requested", SECOND, available),
                    _trace(cat.actuator_signal(a, cat.TORQUE), "measured", REF, available),
                    _trace(
                        f"{a}.{cat.TORQUE_AVAILABLE}", "available ±", LIMIT, available, mirror=True
                    ),
                ],
            )
        )
    wheel_rows = []
    for side, act in sorted(profile.wheels().items()):
        a = act.name
        wheel_rows.append(
            _row(
                f"{a} ({'left' if side == 'l' else 'right'})",
                a,
                [
                    _trace(f"{a}.{cat.RIM_SPEED}", "rim speed", MAIN, available),
                    _trace(f"{a}.{cat.CONTACT_SPEED}", "contact ground speed", SECOND, available),
                ],
            )
        )
    if cat.YAW_RATE_WHEELS in available:
        wheel_rows.append(
            _row(
                "yaw rate",
                None,
                [
                    _trace(cat.YAW_RATE, "gyro", MAIN, available),
                    _trace(cat.YAW_RATE_WHEELS, "from wheels", SECOND, available),
                ],
            )
        )
    roll_band = [_line(th.roll_band, cat.ROLL_ERROR, "tolerance band", mirror=True)]
    roll_rows = [
        _row(
            "roll",
            None,
            [
                _trace(cat.ROLL, "roll", MAIN, available),
                _trace(cat.ROLL_REF, "roll reference", REF, available),
                _trace(cat.ROLL_ZMP_LEAN, "lean that centres the ZMP", SECOND, available),
            ],
        ),
        _row("roll error", None, [_trace(cat.ROLL_ERROR, "error", MAIN, available)], roll_band),
    ]
    tip_rows = [
        _row(
            "tip-over margin",
            None,
            [_trace(cat.TIP_MARGIN, "margin (model estimate)", MAIN, available)],
            [_line(th.tip_margin_on, cat.TIP_MARGIN, "low-margin threshold", mirror=False)],
        )
    ]
    pitch_limit = [_line(th.pitch_limit, cat.PITCH, "pitch limit", mirror=True)]
    balance_rows = [
        _row(
            "pitch",
            None,
            [
                _trace(cat.PITCH, "pitch", MAIN, available),
                _trace(cat.PITCH_REF, "pitch reference", REF, available),
            ],
            pitch_limit,
        ),
        _row(
            "speed",
            None,
            [
                _trace(cat.VEL_X, "forward speed", MAIN, available),
                _trace(cat.VEL_X_REF, "speed reference", REF, available),
            ],
        ),
        _row(
            "leg length",
            None,
            [
                _trace(cat.LEG_L_LENGTH, "left", MAIN, available),
                _trace(cat.LEG_R_LENGTH, "right", SECOND, available),
                _trace(cat.HEIGHT_REF, "height reference", REF, available),
            ],
        ),
    ]
    return [
        _panel(
            "torque",
            "Torque per actuator, with the torque available",
            [cat.SATURATION],
            torque_rows,
            why("saturation", "torques"),
        ),
        _panel(
            "wheels",
            "Wheel rim speed against contact ground speed",
            [cat.SLIP, cat.YAW_SLIP],
            wheel_rows,
            why("slip", "rim and contact speeds"),
        ),
        _panel(
            "roll",
            "Roll, roll reference and the lean that centres the ZMP",
            [cat.ROLL_ERROR],
            roll_rows,
            why("roll", "roll, roll reference"),
        ),
        _panel(
            "tip",
            "Lateral tip-over margin (model estimate)",
            [cat.LOW_TIP_MARGIN],
            tip_rows,
            why("tip", "tip-over margin"),
        ),
        _panel(
            "balance",
            "Pitch, forward speed and leg length",
            [cat.PITCH_EXCURSION, cat.FALL],
            balance_rows,
            why("balance", "pitch, speed, leg length"),
        ),
    ]


def plan_signals(plan: list[dict[str, Any]]) -> list[str]:
    """Every signal a plan draws, once, in plan order."""
    seen: dict[str, None] = {}
    for panel in plan:
        for row in panel["rows"]:
            for trace in row["traces"]:
                seen.setdefault(trace["signal"], None)
    return list(seen)
