"""Plain-text tables of a run's laps, per-lap KPIs and drift (for ``show`` and ``compare``)."""

from __future__ import annotations

import math
from typing import Any

from analysis.lap_kpis import display_laps

#: Column heading and format of each per-lap KPI in the text table.
_COLUMNS = {
    "lap_time": ("time s", "{:8.2f}"),
    "saturation_share": ("sat %", "{:7.2%}"),
    "slip_events": ("slips", "{:5.0f}"),
    "min_tip_margin": ("min tip", "{:7.3f}"),
    "roll_error_rms": ("roll RMS deg", "{:12.3f}"),
    "energy": ("energy J", "{:9.0f}"),
}


def _cell(fmt: str, value: Any) -> str:
    width = len(fmt.format(0.0))
    if value is None or (isinstance(value, float) and not math.isfinite(value)):
        return "not run".rjust(width)
    return fmt.format(value)


def lap_lines(report: dict[str, Any] | None) -> list[str]:
    """Lines describing a stored lap report, values in the units shown to people."""
    if report is None:
        return ["laps: not found for this analysis; run `outrigger analyse RUN` again."]
    shown = display_laps(report) or {}
    lines = [f"laps: {shown.get('reason', '')}"]
    rows = shown.get("kpis", [])
    if not rows:
        return lines
    head = f"{'lap':>4s} {'start s':>9s} {'length m':>9s} "
    head += " ".join(h.rjust(len(f.format(0.0))) for h, f in _COLUMNS.values())
    lines.append(head)
    laps = {lap["number"]: lap for lap in shown.get("laps", [])}
    for row in rows:
        lap = laps.get(row["lap"], {})
        mark = "*" if row.get("partial") else " "
        line = f"{row['lap']:>3d}{mark} {row['start_s']:9.1f} {lap.get('length_m', float('nan')):9.1f} "
        line += " ".join(_cell(f, row.get(k)) for k, (_, f) in _COLUMNS.items())
        lines.append(line)
    if any(r.get("partial") for r in rows):
        lines.append("  * partial lap (before the first or after the last start-line crossing)")
    lines += drift_lines(shown)
    return lines


def drift_lines(shown: dict[str, Any]) -> list[str]:
    """The drift section of a lap report already in shown units (see ``display_laps``)."""
    lines = [
        "drift over the complete laps (Mann-Kendall test, 5 % level; "
        "change = Theil-Sen slope x (laps - 1)):"
    ]
    for key, d in shown.get("drift", {}).items():
        label = d.get("label", key)
        if d.get("verdict") == "not run":
            lines.append(f"  {label}: not run")
            continue
        unit = d.get("unit") or ""
        unit = "" if unit in ("-", "count") else f" {unit}"
        change = d.get("change")
        p = d.get("p")
        change_s = "n/a" if change is None else f"{change:+.4g}{unit}"
        p_s = "n/a (too few laps)" if p is None else f"{p:.3g}"
        lines.append(f"  {label}: {d['verdict']} (change over the run {change_s}, p = {p_s})")
    return lines


def compare_lap_lines(laps: dict[str, Any] | None) -> list[str]:
    """Lap-by-lap table of a comparison (means of A and B per lap) and each run's drift."""
    if not laps:
        return []
    lines = [f"Lap by lap (course lap {laps['course_m']:.1f} m; mean of each version's runs):"]
    keys = ("lap_time", "min_tip_margin", "roll_error_rms", "energy")
    heads = {"lap_time": "time s", "min_tip_margin": "min tip", "roll_error_rms": "roll RMS deg",
             "energy": "energy J"}  # fmt: skip
    lines.append(
        f"{'lap':>4s} " + " ".join(f"{heads[k] + ' A':>14s} {heads[k] + ' B':>14s}" for k in keys)
    )
    for entry in laps.get("by_lap", []):
        cells = []
        for k in keys:
            for side in ("a", "b"):
                v = entry["kpis"][k][side]
                shown = display_laps({"kpis": [{k: v}]}) or {}
                v = shown["kpis"][0][k]
                cells.append("not run".rjust(14) if v is None else f"{v:14.4g}")
        lines.append(f"{entry['lap']:>4d} " + " ".join(cells))
    for rid, report in laps.get("runs", {}).items():
        lines.append(f"Run {rid}: {report.get('reason', '')}")
        lines += ["  " + x for x in drift_lines(display_laps(report) or {})]
    return lines
