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
    lines.append(
        "drift over the complete laps (Mann-Kendall test, 5 % level; change = Theil-Sen slope x laps):"
    )
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
