"""One self-contained HTML file of a comparison, to attach to a test report.

The file carries plotly.js inline (from the installed plotly package), the
tables (in the units a person reads: deg, %, 3 significant digits; the
per-segment tables folded) and one overlay chart per signal against course
position in the Run page's look, with the key of runs and event colours; it
opens without any network. The embedded machine-readable comparison stays SI. Every piece of user text (run names, courses,
controllers) is HTML-escaped.
"""

from __future__ import annotations

import html
import json
from typing import Any

import plotly.graph_objects as go
import plotly.io as pio
from plotly.offline import get_plotlyjs

from analysis.compare.compare import Comparison, KpiRow
from analysis.compare.table import verdict_text
from analysis.display import display_kpi_row, display_overlay, export_value, people

#: Run colours, the same as the compare page (web/js/palette.js RUN_COLOURS):
#: black and neutral grey, which no event kind uses.
RUN_COLOURS = {"A": "#000000", "B": "#8C8C8C"}
RUN_DASH = {"A": "solid", "B": "dash"}
#: Event-kind colours of the dashboard (web/js/palette.js, Okabe & Ito 2008).
EVENT_COLOURS = {
    "saturation": "#D55E00",
    "slip": "#E69F00",
    "yaw_slip": "#F0E442",
    "low_tip_margin": "#CC79A7",
    "roll_error": "#56B4E9",
    "pitch_excursion": "#009E73",
    "fall": "#0072B2",
}

#: The Run page's chart look (web/css/style.css): ink, grid and font.
INK = "#24323A"
GRID = "#E2E5E1"
FONT = "system-ui, -apple-system, 'Segoe UI', sans-serif"
#: Plotly options of every chart: no stock toolbar, no logo (the project's own look).
PLOT_CONFIG = {"displayModeBar": False, "displaylogo": False, "responsive": True}

_CSS = """
body { font: 14px/1.4 system-ui, -apple-system, 'Segoe UI', sans-serif; color: #24323A;
       margin: 24px auto; max-width: 1100px; padding: 0 16px; }
h1 { font-size: 22px; } h2 { font-size: 17px; margin-top: 28px; }
table { border-collapse: collapse; width: 100%; margin: 8px 0; }
th, td { border-bottom: 1px solid #E2E5E1; padding: 4px 8px; text-align: left; }
td.num { text-align: right; font-variant-numeric: tabular-nums; }
.better { color: #0F6B3A; font-weight: 600; } .worse { color: #9B1C1C; font-weight: 600; }
.refusal { border: 1px solid #9B1C1C; padding: 8px 12px; background: #FDF3F2; }
.note { color: #4A5A63; } .swatch { display: inline-block; width: 18px; height: 3px;
        vertical-align: middle; margin-right: 4px; }
.legend { display: flex; flex-wrap: wrap; gap: 4px 16px; font-size: 13px; color: #4A5A63;
          margin: 6px 0; }
.legend .box { display: inline-block; width: 12px; height: 12px; border-radius: 2px;
               vertical-align: -2px; margin-right: 4px; }
.run-line { display: inline-block; width: 24px; border-top: 2px solid; vertical-align: middle;
            margin-right: 4px; } .run-line.dash { border-top-style: dashed; }
details.segment { margin: 10px 0; } details.segment summary { cursor: pointer; font-weight: 600; }
"""


def _legend(view: dict[str, Any]) -> str:
    """The key of every chart: run lines of A and B, and the colour of each event kind."""
    runs = [
        f"<span><span class='run-line{' dash' if v == 'B' else ''}' "
        f"style='border-top-color:{RUN_COLOURS[v]}'></span>{v}: {_esc(name)}</span>"
        for v, name in dict.fromkeys((tr["version"], tr["name"]) for tr in view["traces"])
    ]
    kinds = sorted({ev["kind"] for ev in view["events"]})
    boxes = [
        f"<span data-kind='{_esc(k)}'><span class='box' style='background:"
        f"{EVENT_COLOURS.get(k, '#666666')}'></span>{_esc(k.replace('_', ' '))}</span>"
        for k in kinds
    ]
    events = (
        "<span>Events (A lower half, B upper half):</span>" + "".join(boxes)
        if boxes
        else "<span>No events on this stretch.</span>"
    )
    return f"<div class='legend' id='run-key'>{''.join(runs)}</div>" + (
        f"<div class='legend' id='event-legend'>{events}</div>"
    )


def _esc(x: Any) -> str:
    return html.escape("" if x is None else str(x))


def _num(x: float | None) -> str:
    """A number as a person reads it (3 significant digits), '–' when missing."""
    return people(x)


def _kpi_table(rows: list[KpiRow]) -> str:
    """KPI rows in the units a person reads (deg, %), 3 significant digits."""
    head = (
        "<tr><th>KPI</th><th>Unit</th><th>Better</th><th class='num'>A</th>"
        "<th class='num'>B</th><th class='num'>B − A</th><th class='num'>%</th>"
        "<th class='num'>95% interval</th><th class='num'>adj. p</th><th>Verdict</th></tr>"
    )
    body = []
    for row in rows:
        r = display_kpi_row(row.to_dict())
        verdict = r["verdict"]
        cls = "better" if verdict == "better" else "worse" if verdict == "worse" else ""
        low, high = r["low"], r["high"]
        interval = f"{_num(low)} … {_num(high)}" if low is not None and high is not None else "–"
        body.append(
            f"<tr data-kpi='{_esc(r['key'])}'><td>{_esc(r['label'])}</td>"
            f"<td class='unit'>{_esc(r['unit'])}</td>"
            f"<td>{_esc(r['better'])}</td><td class='num'>{_num(r['a'])}</td>"
            f"<td class='num'>{_num(r['b'])}</td><td class='num'>{_num(r['diff'])}</td>"
            f"<td class='num'>{_num(r['diff_pct'])}</td><td class='num'>{interval}</td>"
            f"<td class='num'>{people(row.q) if row.q == row.q else '–'}</td>"
            f"<td class='{cls}' title='{_esc(row.basis)}'>{_esc(verdict_text(row))}</td></tr>"
        )
    return f"<table class='kpis'>{head}{''.join(body)}</table>"


def _runs_table(comp: Comparison) -> str:
    rows = []
    for version, runs in (("A", comp.runs_a), ("B", comp.runs_b)):
        for r in runs:
            off = comp.offsets.get(r["run"])
            rows.append(
                f"<tr><td><span class='swatch' style='background:{RUN_COLOURS[version]}'></span>"
                f"{version}</td><td>{_esc(r['name'])}</td><td>{_esc(r['run'])}</td>"
                f"<td>{_esc(r.get('course'))}</td><td>{_esc(r.get('controller'))}</td>"
                f"<td class='num'>{_num(off)}</td></tr>"
            )
    return (
        "<table><tr><th>Version</th><th>Name</th><th>Run id</th><th>Course</th>"
        "<th>Controller</th><th class='num'>Course offset [m]</th></tr>"
        + "".join(rows)
        + "</table>"
    )


def _figure(signal: dict[str, str], view: dict[str, Any]) -> go.Figure:
    fig = go.Figure()
    name = signal["name"]
    shown = set()
    for tr in view["traces"]:
        data = tr["signals"].get(name)
        if not data:
            continue
        v = tr["version"]
        fig.add_trace(
            go.Scatter(
                x=data["x"], y=data["y"], mode="lines",
                name=html.escape(f"{v}: {tr['name']}"), legendgroup=v, showlegend=True,
                line={"color": RUN_COLOURS[v], "width": 1.3, "dash": RUN_DASH[v]},
            )
        )  # fmt: skip
    for seg in view["segments"][1:]:
        fig.add_vline(x=seg["start_m"], line={"color": "#9AA5AB", "width": 1, "dash": "dot"})
    for ev in view["events"]:
        y0, y1 = (0.0, 0.5) if ev["version"] == "A" else (0.5, 1.0)
        fig.add_shape(
            type="rect", xref="x", yref="paper", x0=ev["start_m"], x1=max(ev["end_m"], ev["start_m"] + 0.2),
            y0=y0, y1=y1, fillcolor=EVENT_COLOURS.get(ev["kind"], "#666666"), opacity=0.18,
            line={"width": 0}, layer="below",
        )  # fmt: skip
        if ev["kind"] not in shown:
            shown.add(ev["kind"])
    unit = signal["unit"]
    fig.update_layout(
        title={"text": html.escape(f"{signal['label']} [{unit}]"), "font": {"size": 13},
               "x": 0, "xanchor": "left"},
        height=260, margin={"l": 60, "r": 16, "t": 32, "b": 34},
        xaxis={"title": {"text": "course position [m]"}, "gridcolor": GRID, "zeroline": False},
        yaxis={"gridcolor": GRID, "zeroline": False},
        plot_bgcolor="#FFFFFF", paper_bgcolor="#FFFFFF",
        font={"family": FONT, "color": INK, "size": 12},
        showlegend=False,
    )  # fmt: skip
    return fig


def build_report(comparison: Comparison, view: dict[str, Any], title: str | None = None) -> str:
    """The HTML text of the report.

    Parameters
    ----------
    comparison : Comparison
    view : dict
        From :func:`analysis.compare.view.overlay` on the same runs.
    title : str, optional
        Page title (escaped).

    Returns
    -------
    str
        A complete HTML document with plotly.js inline.
    """
    comp = comparison
    shown = display_overlay(view)
    names_a = ", ".join(str(r["name"]) for r in comp.runs_a)
    names_b = ", ".join(str(r["name"]) for r in comp.runs_b)
    title = title or f"Comparison: {names_a} (A) vs {names_b} (B)"
    parts = [
        "<!doctype html><html lang='en'><head><meta charset='utf-8'>",
        f"<title>{_esc(title)}</title><style>{_CSS}</style>",
        f"<script type='text/javascript'>{get_plotlyjs()}</script></head><body>",
        f"<h1>{_esc(title)}</h1>",
        _runs_table(comp),
    ]
    if comp.refusal:
        parts.append(f"<p class='refusal' id='refusal'>{_esc(comp.refusal)}</p>")
    for al in comp.alignments:
        parts.append(f"<p class='note'>Alignment of {_esc(al['run'])}: {_esc(al['reason'])}</p>")
    s = comp.settings
    parts.append(
        f"<p class='note' id='basis'>Verdicts rest on: <strong>{_esc(s.get('basis'))}</strong>. "
        f"Differences are B − A. Intervals: {_esc(int(s['level'] * 100))}% "
        f"({_esc(s['resampling'])}; {_esc(s['n_boot'])} bootstrap replicates where resampled, "
        f"seed {_esc(s['seed'])}, blocks of about {_esc(s['block_m'])} m). A verdict is "
        f"'better' or 'worse' only when the whole interval lies on one side of zero and the "
        f"call survives the correction for the many cells of its table (false discovery rate, "
        f"adjusted p at most {_esc(s.get('fdr_q'))}).</p>"
    )
    parts.append("<h2>Overall</h2>" + _kpi_table(comp.kpis))
    for note in comp.notes:
        parts.append(f"<p class='note'>{_esc(note)}</p>")
    parts.append("<h2>Overlay against course position</h2>")
    parts.append(_legend(shown))
    for i, signal in enumerate(shown["signals"]):
        fig = _figure(signal, shown)
        parts.append(
            pio.to_html(
                fig, include_plotlyjs=False, full_html=False, div_id=f"chart-{i}",
                config=PLOT_CONFIG,
            )
        )  # fmt: skip
    if comp.same_course and comp.segments:
        parts.append("<h2>Segments</h2><table><tr><th>Segment</th><th>Kind</th>"
                     "<th class='num'>From [m]</th><th class='num'>To [m]</th></tr>")  # fmt: skip
        for seg in comp.segments:
            parts.append(
                f"<tr><td>{_esc(seg.name)}</td><td>{_esc(seg.kind)}</td>"
                f"<td class='num'>{seg.start_m:.1f}</td><td class='num'>{seg.end_m:.1f}</td></tr>"
            )
        parts.append("</table>")
        parts.append("<h2>KPIs per segment</h2>")
        for seg in comp.segments:
            parts.append(
                f"<details class='segment' data-segment='{_esc(seg.name)}'><summary>Segment "
                f"{_esc(seg.name)} ({_esc(seg.kind)}, {seg.start_m:.1f}–{seg.end_m:.1f} m)"
                "</summary>" + _kpi_table(comp.segment_kpis.get(seg.name, [])) + "</details>"
            )
    parts.append(
        "<p class='note'>Outrigger reads logs after the fact; it is not a safety system. The "
        "tip-over margin is a model estimate. Follow your test site's procedures (emergency "
        "stop, tether, exclusion zone) and local rules.</p>"
    )
    parts.append(
        "<script type='application/json' id='comparison-data'>"
        + json.dumps(export_value({**comp.to_dict(), "units": "si"})).replace("<", "\\u003c")
        + "</script></body></html>"
    )
    return "".join(parts)
