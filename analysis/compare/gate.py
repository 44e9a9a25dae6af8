"""Release gate: rules that version B may not break, checked on a comparison.

A gate is a small table of our own keys (read from TOML by the command line):

- ``<kpi>_increase_max`` / ``<kpi>_drop_max``: largest allowed rise / fall of
  the KPI from A to B, in the KPI's SI unit as ``--json`` gives it
  (``roll_error_rms_increase_max = 0.002`` in rad, ``saturation_share_increase_max
  = 0.01`` as a fraction, ``min_tip_margin_drop_max = 0.05``). Messages show
  values and limits in the units a person reads (deg, %), 3 significant digits,
  and word the change by its sign (rose, fell, stayed at).
- ``<kpi>_increase_max_pct`` / ``<kpi>_drop_max_pct``: the same in percent of A.
- ``new_falls_allowed = false``: B may not fall more often per run than A.
- ``no_worse = ["roll_error_rms", ...]``: these KPIs may not get the verdict "worse".
- ``<kpi>_drift_max``: for multi-lap runs compared lap by lap, the largest
  change of a per-lap KPI (``lap_time``, ``saturation_share``, ``slip_events``,
  ``min_tip_margin``, ``roll_error_rms``, ``energy``) over any B run, in its
  worse direction, when the Mann-Kendall test finds it drifting
  (:mod:`analysis.lap_kpis`); change = Theil-Sen slope times (laps - 1).
  The verdict is the corrected one (false discovery rate over the table, see
  :mod:`analysis.compare.table`). An indicative extreme (peak slip speed,
  minimum tip-over margin, max roll error) gets no verdict, so ``no_worse`` on
  one is refused with that reason; bound it with a limit instead. A KPI whose
  versions drove at clearly different speeds gets no verdict either, and its
  ``no_worse`` rule is broken: a gate does not pass what it cannot check.
- ``min_runs_per_version = 3``: the comparison must rest on at least this many
  runs (or laps, when it compares laps) of each version; fewer breaks the gate.
  With one run per version an interval shows the spread within that run only,
  and same-controller runs are then called different in many cells
  (``benchmarks/bench_calibration.py``), so a gate meant to block real
  regressions only should ask for replicates.
- ``decide_on = "estimate"`` (default: the difference itself is held against the
  limit) or ``"interval"`` (a limit is broken only when the whole 95% interval
  lies beyond it, i.e. the excess is clear of run-to-run noise).

``<kpi>`` is a KPI key such as ``roll_error_rms`` or ``wheel_l.energy`` (in
TOML a dotted key, or a ``[wheel_l]`` table), or a per-channel metric name such
as ``saturation_share`` that then applies to every channel.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

from analysis.compare.bootstrap import LEVEL, NO_VERDICT, WORSE
from analysis.compare.compare import Comparison, KpiRow
from analysis.compare.course_kpis import INDICATIVE_METRICS, METRICS
from analysis.display import display_unit, kpi_si_unit, people, snap_change
from analysis.errors import CompareError
from analysis.lap_kpis import LAP_KPI_KEYS

DRIFT_SUFFIX = "_drift_max"
LIMIT_SUFFIXES = ("_increase_max_pct", "_drop_max_pct", "_increase_max", "_drop_max")
DECIDE_ON = ("estimate", "interval")


@dataclass(frozen=True)
class Rule:
    """One gate rule.

    Attributes
    ----------
    key : str
        The key as written in the gate file.
    target : str
        KPI key or metric name it applies to ("falls" for new_falls_allowed).
    kind : str
        ``increase_max``, ``drop_max``, ``increase_max_pct``, ``drop_max_pct``,
        ``no_new_falls``, ``no_worse`` or ``drift_max``.
    limit : float
        Limit in the KPI unit, or percent of A. [KPI unit or %]
    """

    key: str
    target: str
    kind: str
    limit: float


@dataclass(frozen=True)
class GateCheck:
    """Outcome of one rule on one KPI."""

    rule: str
    kpi: str
    broken: bool
    message: str

    def to_dict(self) -> dict[str, Any]:
        """JSON shape."""
        return {"rule": self.rule, "kpi": self.kpi, "broken": self.broken, "message": self.message}


@dataclass(frozen=True)
class Gate:
    """A parsed gate: its rules and how limits are decided."""

    rules: tuple[Rule, ...]
    decide_on: str = "estimate"
    min_runs: int = 1


def _flatten(table: Mapping[str, Any], prefix: str = "") -> dict[str, Any]:
    out: dict[str, Any] = {}
    for k, v in table.items():
        key = f"{prefix}{k}"
        if isinstance(v, Mapping):
            out.update(_flatten(v, key + "."))
        else:
            out[key] = v
    return out


def _metric_of(target: str) -> str:
    return target.rpartition(".")[2]


def gate_from_mapping(data: Mapping[str, Any], where: str = "gate file") -> Gate:
    """Build and check a gate from parsed TOML (top level or a ``[gate]`` table).

    Parameters
    ----------
    data : mapping
        Parsed gate file.
    where : str
        Name of the source, for messages.

    Returns
    -------
    Gate
    """
    table = data.get("gate", data)
    if not isinstance(table, Mapping):
        raise CompareError(f"{where}: [gate] must be a table of rules.")
    flat = _flatten(table)
    decide_on = flat.pop("decide_on", "estimate")
    min_runs = flat.pop("min_runs_per_version", 1)
    if isinstance(min_runs, bool) or not isinstance(min_runs, int) or min_runs < 1:
        raise CompareError(
            f"{where}: min_runs_per_version must be a whole number >= 1, found {min_runs!r}."
        )
    if decide_on not in DECIDE_ON:
        raise CompareError(
            f"{where}: decide_on must be one of {', '.join(DECIDE_ON)}, found {decide_on!r}."
        )
    rules: list[Rule] = []
    valid = (
        f"<kpi>{'|'.join(LIMIT_SUFFIXES)} with <kpi> one of {', '.join(METRICS)} "
        f"(optionally '<channel>.'), <lap kpi>{DRIFT_SUFFIX} with <lap kpi> one of "
        f"{', '.join(LAP_KPI_KEYS)}, new_falls_allowed, no_worse, min_runs_per_version, "
        f"decide_on"
    )
    for key, value in flat.items():
        if key == "new_falls_allowed":
            if not isinstance(value, bool):
                raise CompareError(
                    f"{where}: new_falls_allowed must be true or false, found {value!r}."
                )
            if not value:
                rules.append(Rule(key, "falls", "no_new_falls", 0.0))
            continue
        if key == "no_worse":
            if not isinstance(value, list) or not all(isinstance(x, str) for x in value):
                raise CompareError(
                    f"{where}: no_worse must be a list of KPI names, found {value!r}."
                )
            for name in value:
                if _metric_of(name) not in METRICS:
                    raise CompareError(
                        f"{where}: no_worse names unknown KPI {name!r}; KPIs: {', '.join(METRICS)}."
                    )
                if _metric_of(name) in INDICATIVE_METRICS:
                    raise CompareError(
                        f"{where}: no_worse cannot hold {name!r}: it is an extreme of a run, "
                        f"indicative only, and gets no better/worse verdict (its interval is "
                        f"rough). Bound it with a limit instead, e.g. "
                        f"{name}_{'drop' if _metric_of(name) == 'min_tip_margin' else 'increase'}"
                        f"_max = <largest change allowed>."
                    )
                rules.append(Rule(key, name, "no_worse", 0.0))
            continue
        if key.endswith(DRIFT_SUFFIX) and key[: -len(DRIFT_SUFFIX)] in LAP_KPI_KEYS:
            rules.append(
                Rule(key, key[: -len(DRIFT_SUFFIX)], "drift_max", _limit(where, key, value))
            )
            continue
        suffix = next((s for s in LIMIT_SUFFIXES if key.endswith(s)), None)
        target = key[: -len(suffix)] if suffix else ""
        if suffix is None or _metric_of(target) not in METRICS:
            raise CompareError(f"{where}: unknown gate key {key!r}. Valid keys: {valid}.")
        rules.append(Rule(key, target, suffix.lstrip("_"), _limit(where, key, value)))
    if not rules and min_runs == 1:
        raise CompareError(
            f"{where} has no rules; an empty gate would pass anything. Keys: {valid}."
        )
    return Gate(tuple(rules), decide_on, min_runs)


def _limit(where: str, key: str, value: Any) -> float:
    if isinstance(value, bool) or not isinstance(value, int | float) or not math.isfinite(value):
        raise CompareError(f"{where}: {key} must be a finite number, found {value!r}.")
    if value < 0:
        raise CompareError(
            f"{where}: {key} must be >= 0 (it is the largest change allowed), found {value!r}."
        )
    return float(value)


def _check_drift(rule: Rule, comparison: Comparison) -> list[GateCheck]:
    """A drift rule on every B run of a lap-by-lap comparison."""
    laps = comparison.laps
    if not laps:
        return [
            GateCheck(
                rule.key, rule.target, True,
                f"{rule.key}: cannot check the drift of {rule.target}: this comparison is not lap "
                f"by lap (the runs are not laps of one loop); a gate does not pass what it cannot "
                f"check.",
            )
        ]  # fmt: skip
    out = []
    for run in comparison.runs_b:
        rid = run["run"]
        d = laps["runs"].get(rid, {}).get("drift", {}).get(rule.target)
        if not d or d.get("verdict") == "not run":
            out.append(GateCheck(rule.key, rule.target, True,
                                 f"{rule.key}: {rule.target} of run {rid} was not run; cannot check."))  # fmt: skip
            continue
        change = d.get("change")
        size = abs(change) if change is not None else math.nan
        broken = d["verdict"] == WORSE and not size <= rule.limit
        p = d.get("p")
        p_s = "n/a" if p is None else f"{p:.3g}"
        unit = "" if d.get("unit") in ("-", "count", "", None) else f" {d['unit']}"
        what = (
            f"drifts {d['direction']} ({d['verdict']}) by {_fmt(size)}{unit} over {d['n']} laps"
            if d.get("drifts")
            else f"shows no drift over {d['n']} laps (change {_fmt(size)}{unit})"
        )
        out.append(
            GateCheck(rule.key, rule.target, broken,
                      f"{rule.key}: {d['label']} of run {rid} {what} (Mann-Kendall p = {p_s}; "
                      f"limit {_fmt(rule.limit)}{unit})")
        )  # fmt: skip
    return out


def _matching(rows: list[KpiRow], target: str) -> list[KpiRow]:
    return [r for r in rows if r.key == target or (r.channel and r.metric == target)]


def _fmt(x: float) -> str:
    return "n/a" if not math.isfinite(x) else people(x)


def _shown(row: KpiRow) -> tuple[str, float]:
    """The unit a person reads the row in (' deg', '%', '' ...) and the factor from SI."""
    unit, factor = display_unit(kpi_si_unit(row.metric, row.unit))
    if unit in ("-", ""):
        return "", factor
    return ("%" if unit == "%" else f" {unit}"), factor


def change_words(label: str, a: float, b: float, unit: str = "") -> str:
    """'<label> rose from A to B', '... fell from A to B' or '... stayed at A'.

    The verb follows the sign of B - A; values equal as a person reads them (3
    significant digits) 'stay'. ``a`` and ``b`` are in the shown unit, ``unit``
    is appended to each number.
    """
    sa, sb = _fmt(a), _fmt(b)
    if not (math.isfinite(a) and math.isfinite(b)):
        return f"{label} went from {sa}{unit} to {sb}{unit}"
    if a == b or sa == sb:
        return f"{label} stayed at {sa}{unit}" if a == b else f"{label} stayed at about {sa}{unit}"
    verb = "rose" if b > a else "fell"
    return f"{label} {verb} from {sa}{unit} to {sb}{unit}"


def _check_limit(rule: Rule, row: KpiRow, decide_on: str, level_pct: str) -> GateCheck:
    pct = rule.kind.endswith("_pct")
    up = rule.kind.startswith("increase")
    unit, factor = _shown(row)
    if pct:
        scale = 100.0 / abs(row.a) if math.isfinite(row.a) and row.a != 0 else math.nan
    else:
        scale = 1.0
    est, low, high = row.diff * scale, row.low * scale, row.high * scale
    if not up:
        est, low, high = -est, -high, -low
    # The change in the rule's direction: estimate, or the interval's nearer end.
    value = est if decide_on == "estimate" else low
    a, b = row.a * factor, row.b * factor
    if not math.isfinite(value):
        return GateCheck(
            rule.key, row.key, True,
            f"{rule.key}: cannot check {row.key} (A = {_fmt(a)}{unit}, B = {_fmt(b)}{unit}, "
            f"interval {_fmt(row.low * factor)}..{_fmt(row.high * factor)}{unit}); "
            "a gate does not pass what it cannot check.",
        )  # fmt: skip
    broken = value > rule.limit
    direction = "rise" if up else "fall"
    what = (
        direction
        if decide_on == "estimate"
        else f"lower end of the {level_pct} interval of the {direction}"
    )
    if pct:
        amount = f"{_fmt(value)}% of A; limit {_fmt(rule.limit)}% of A"
    else:
        amount = f"{_fmt(value * factor)}{unit}; limit {_fmt(rule.limit * factor)}{unit}"
    msg = f"{rule.key}: {change_words(row.label, a, b, unit)} ({what} {amount})"
    return GateCheck(rule.key, row.key, broken, msg)


def check_gate(comparison: Comparison, gate: Gate) -> list[GateCheck]:
    """Check every rule of a gate on the overall KPIs of a comparison.

    Parameters
    ----------
    comparison : Comparison
    gate : Gate

    Returns
    -------
    list of GateCheck
        One per rule and matching KPI; a rule whose KPI the comparison lacks is
        broken (it cannot be checked).
    """
    rows = comparison.kpis
    level_pct = f"{100 * float(comparison.settings.get('level', LEVEL)):g}%"
    checks: list[GateCheck] = []
    if gate.min_runs > 1:
        s = comparison.settings
        n = min(int(s.get("units_a", 1)), int(s.get("units_b", 1)))
        unit = str(s.get("unit", "run"))
        checks.append(
            GateCheck(
                "min_runs_per_version", "runs", n < gate.min_runs,
                f"min_runs_per_version = {gate.min_runs}: the comparison rests on "
                f"{s.get('basis', f'{n} {unit}(s) per version')}"
                + (f"; drive at least {gate.min_runs} {unit}s of each version" if n < gate.min_runs
                   else ""),
            )
        )  # fmt: skip
    for rule in gate.rules:
        if rule.kind == "drift_max":
            checks.extend(_check_drift(rule, comparison))
            continue
        matched = _matching(rows, rule.target)
        if not matched:
            checks.append(
                GateCheck(
                    rule.key, rule.target, True,
                    f"{rule.key}: this comparison has no KPI {rule.target!r} (its signal is "
                    f"missing from a run); KPIs: {', '.join(r.key for r in rows)}.",
                )
            )  # fmt: skip
            continue
        for row in matched:
            if rule.kind == "no_new_falls":
                broken = row.b > row.a
                checks.append(
                    GateCheck(rule.key, row.key, broken,
                              "new_falls_allowed = false: "
                              + change_words("falls per run", row.a, row.b)
                              + (" — B falls more often" if broken else ""))
                )  # fmt: skip
            elif rule.kind == "no_worse":
                unchecked = row.verdict == NO_VERDICT
                broken = row.verdict == WORSE or unchecked
                why = "; cannot check it, so the rule is broken" if unchecked else ""
                unit, f = _shown(row)
                diff = snap_change(row.diff * f, row.a * f, row.b * f)
                checks.append(
                    GateCheck(rule.key, row.key, broken,
                              f"no_worse: {row.label} verdict '{row.verdict}' (B - A "
                              f"{_fmt(diff if diff is not None else math.nan)}{unit}, {level_pct} "
                              f"interval {_fmt(row.low * f)}..{_fmt(row.high * f)}{unit}, "
                              f"adjusted p {_fmt(row.q)}; rests on {row.basis}){why}")
                )  # fmt: skip
            else:
                checks.append(_check_limit(rule, row, gate.decide_on, level_pct))
    return checks
