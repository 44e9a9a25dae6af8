// Compare page: pick runs of versions A and B, then show the KPI table with B − A,
// intervals and verdicts, overlay charts against course position (segment boundaries,
// both versions' events) and the per-segment tables. All user text goes in as text.
import { el, fmt, getJSON, showError } from "./api.js";
import { initLayout } from "./layout.js";
import { eventColour, kindLabel, RUN_COLOURS } from "./palette.js";

const form = document.getElementById("picker");
const errorBox = document.getElementById("error");
const busy = document.getElementById("busy");
const result = document.getElementById("result");
const reportLink = document.getElementById("report-link");
const DASH = { A: "solid", B: "dash" };
const INK = "#24323A";
const GRID = "#E2E5E1";
const COLOUR = { A: RUN_COLOURS.a, B: RUN_COLOURS.b };

// Plotly renders a few HTML-like tags in legend text: escape user text for it.
function plotText(s) {
  return String(s).replace(/&/g, "&amp;").replace(/</g, "&lt;").replace(/>/g, "&gt;");
}

function runLabel(r) {
  const parts = [r.name || r.run_id, r.controller, r.date ? r.date.slice(0, 16).replace("T", " ") : null];
  return parts.filter(Boolean).join(" · ");
}

function params() {
  return new URLSearchParams(location.search);
}

// ----- picker ---------------------------------------------------------------------
async function fillPicker() {
  const { runs } = await getJSON("/api/runs");
  const chosen = params();
  const selA = form.elements.a;
  selA.replaceChildren(...runs.map((r) => el("option", { value: r.run_id, selected: chosen.getAll("a").includes(r.run_id) }, runLabel(r))));
  await fillB(runs, chosen.getAll("b"));
  form.elements.marks.value = chosen.get("marks") || "";
  selA.addEventListener("change", () => fillB(runs, [...form.elements.b.selectedOptions].map((o) => o.value)));
}

// Version B choices: runs of the first chosen A run's course first.
async function fillB(runs, selected) {
  const selB = form.elements.b;
  const first = form.elements.a.selectedOptions[0];
  let same = [];
  let other = runs;
  if (first) {
    const c = await getJSON(`/api/compare/candidates?run=${encodeURIComponent(first.value)}`);
    const byId = new Map(runs.map((r) => [r.run_id, r]));
    same = c.same_course.map((r) => byId.get(r.run_id) || r);
    other = c.other.map((r) => byId.get(r.run_id) || r);
    other.unshift(byId.get(first.value));
    other = other.filter(Boolean);
  }
  const opt = (r) => el("option", { value: r.run_id, selected: selected.includes(r.run_id) }, runLabel(r));
  const groups = [];
  if (same.length) groups.push(el("optgroup", { label: "Same course" }, ...same.map(opt)));
  groups.push(el("optgroup", { label: same.length ? "Other runs" : "Runs" }, ...other.map(opt)));
  selB.replaceChildren(...groups);
}

form.addEventListener("submit", (ev) => {
  ev.preventDefault();
  const q = new URLSearchParams();
  for (const o of form.elements.a.selectedOptions) q.append("a", o.value);
  for (const o of form.elements.b.selectedOptions) q.append("b", o.value);
  const marks = form.elements.marks.value.trim();
  if (marks) q.set("marks", marks);
  history.pushState(null, "", `?${q}`);
  load();
});

// ----- tables ---------------------------------------------------------------------
function interval(row) {
  if (row.low === null || row.high === null) return "–";
  return `${fmt(row.low)} … ${fmt(row.high)}`;
}

// The verdict as read: why a call was withheld (same words as analysis/compare/table.py).
function verdictText(r) {
  if (r.indicative) return "no verdict (indicative)";
  if (r.speed_flag) return "no verdict (speeds differ)";
  if (r.verdict === "no clear difference" && (r.raw_verdict === "better" || r.raw_verdict === "worse")) {
    return `no clear difference (${r.raw_verdict} before the correction for many cells)`;
  }
  return r.verdict;
}

function kpiTable(table, rows) {
  const head = el(
    "thead",
    {},
    el("tr", {}, ...["KPI", "Unit", "Better", "A", "B", "B − A", "%", "95% interval", "adj. p", "Verdict"].map((h, i) => el("th", { className: i >= 3 && i <= 8 ? "num" : "" }, h))),
  );
  const body = el("tbody");
  for (const r of rows) {
    const cls = r.verdict === "better" ? "better" : r.verdict === "worse" ? "worse" : "";
    body.append(
      el(
        "tr",
        { dataset: { kpi: r.key } },
        el("td", {}, r.label),
        el("td", {}, r.unit),
        el("td", {}, r.better),
        el("td", { className: "num" }, fmt(r.a, 3)),
        el("td", { className: "num" }, fmt(r.b, 3)),
        el("td", { className: "num" }, fmt(r.diff, 3)),
        el("td", { className: "num" }, r.diff_pct === null ? "–" : fmt(r.diff_pct, 3)),
        el("td", { className: "num" }, interval(r)),
        el("td", { className: "num" }, r.q === null ? "–" : fmt(r.q, 2)),
        el("td", { className: `verdict ${cls}`, title: r.basis, dataset: { verdict: r.verdict } }, verdictText(r)),
      ),
    );
  }
  table.replaceChildren(head, body);
}

function showRuns(comp) {
  const box = document.getElementById("runs");
  const keys = [];
  for (const [v, runs] of [["A", comp.runs_a], ["B", comp.runs_b]]) {
    for (const r of runs) {
      const line = el("span", { className: `run-line${v === "B" ? " dashed" : ""}`, style: { borderTopColor: COLOUR[v] } });
      const off = comp.offsets[r.run];
      keys.push(el("span", { className: "run-key" }, line, `${v}: ${r.name}`, el("span", { className: "muted" }, ` ${r.controller || ""} · offset ${fmt(off, 3)} m`)));
    }
  }
  box.replaceChildren(...keys);
  const refusal = document.getElementById("refusal");
  refusal.hidden = !comp.refusal;
  refusal.textContent = comp.refusal || "";
  document.getElementById("alignment").replaceChildren(...comp.alignments.map((a) => el("li", {}, `${a.run}: ${a.reason}`)));
  document.getElementById("notes").replaceChildren(...comp.notes.map((n) => el("li", {}, n)));
  document.getElementById("basis").textContent = `Verdicts rest on: ${comp.settings.basis || "–"}. Hover a verdict for what it rests on.`;
}

function showSegments(comp) {
  const card = document.getElementById("segments-card");
  card.hidden = !comp.same_course || comp.segments.length === 0;
  if (card.hidden) return;
  const select = document.getElementById("segment-select");
  select.replaceChildren(...comp.segments.map((s) => el("option", { value: s.name }, `${s.name} · ${s.kind} · ${fmt(s.start_m, 3)}–${fmt(s.end_m, 3)} m`)));
  const draw = () => kpiTable(document.getElementById("segment-table"), comp.segment_kpis[select.value] || []);
  select.onchange = draw;
  draw();
}

// ----- charts ---------------------------------------------------------------------
// Lap by lap: each version's mean per lap number, B − A, and each run's drift (shown units).
function showLaps(laps) {
  const card = document.getElementById("laps-card");
  card.hidden = !laps;
  if (!laps) return;
  const keys = ["lap_time", "min_tip_margin", "roll_error_rms", "energy"];
  const defs = Object.fromEntries(laps.kpi_defs.map((d) => [d.key, d]));
  document.getElementById("laps-facts").textContent =
    `Every lap aligned on its own on the reference lap (${fmt(laps.course_m, 4)} m); whole laps are the bootstrap's replicates. Mean of each version's runs per lap number.`;
  const unit = (d) => (d.unit && d.unit !== "-" && d.unit !== "count" ? ` [${d.unit}]` : "");
  const head = el("tr", {}, el("th", { className: "num" }, "Lap"));
  for (const k of keys) for (const side of ["A", "B", "B − A"]) head.append(el("th", { className: "num" }, `${defs[k].label.split(",")[0]} ${side}${unit(defs[k])}`));
  const body = el("tbody");
  for (const entry of laps.by_lap) {
    const tr = el("tr", { dataset: { lap: String(entry.lap) } }, el("td", { className: "num" }, String(entry.lap)));
    for (const k of keys) for (const side of ["a", "b", "diff"]) tr.append(el("td", { className: "num" }, fmt(entry.kpis[k][side], 4)));
    body.append(tr);
  }
  document.getElementById("laps-table").replaceChildren(el("thead", {}, head), body);
  const items = [];
  for (const [rid, rep] of Object.entries(laps.runs)) {
    const drifting = Object.entries(rep.drift || {}).filter(([, d]) => d.drifts);
    const text = drifting.length
      ? drifting.map(([k, d]) => `${defs[k].label}: ${d.verdict}, ${d.change > 0 ? "+" : ""}${fmt(d.change, 3)}${unit(d)} over the run (p = ${fmt(d.p, 2)})`).join("; ")
      : "no KPI drifts";
    items.push(el("li", {}, `Run ${rid} (${rep.kpis.length} laps): ${text}`));
  }
  document.getElementById("laps-drift").replaceChildren(...items);
}

function charts(data) {
  const box = document.getElementById("charts");
  box.replaceChildren();
  const kinds = [...new Set(data.events.map((e) => e.kind))];
  document.getElementById("legend").replaceChildren(
    el("span", {}, "Events (A lower half, B upper half):"),
    ...kinds.map((k) => el("span", {}, el("span", { className: "swatch", style: { background: eventColour(k) } }), ` ${kindLabel(k)}`)),
  );
  // The project's own chart look: no stock toolbar or logo; titles, keys and colours
  // as on the Run page (the key of runs and event kinds sits above the charts).
  const config = { displayModeBar: false, displaylogo: false, responsive: true };
  const plots = [];
  for (const sig of data.signals) {
    const div = el("div", { className: "chart", dataset: { signal: sig.name } });
    box.append(div);
    const traces = [];
    for (const tr of data.traces) {
      const s = tr.signals[sig.name];
      if (!s) continue;
      traces.push({
        type: "scatter",
        mode: "lines",
        x: s.x,
        y: s.y,
        name: plotText(`${tr.version}: ${tr.name}`),
        legendgroup: tr.version,
        line: { color: COLOUR[tr.version], width: 1.3, dash: DASH[tr.version] },
      });
    }
    const shapes = data.segments.slice(1).map((seg) => ({
      type: "line", xref: "x", yref: "paper", x0: seg.start_m, x1: seg.start_m, y0: 0, y1: 1,
      line: { color: "#9AA5AB", width: 1, dash: "dot" },
    }));
    for (const ev of data.events) {
      const [y0, y1] = ev.version === "A" ? [0, 0.5] : [0.5, 1];
      shapes.push({
        type: "rect", xref: "x", yref: "paper", x0: ev.start_m, x1: Math.max(ev.end_m, ev.start_m + 0.2), y0, y1,
        fillcolor: eventColour(ev.kind), opacity: 0.2, line: { width: 0 }, layer: "below",
      });
    }
    const layout = {
      title: { text: plotText(`${sig.label} [${sig.unit}]`), font: { size: 13 }, x: 0, xanchor: "left" },
      margin: { l: 60, r: 16, t: 32, b: 34 },
      xaxis: { title: { text: "course position [m]" }, range: data.stretch_m, gridcolor: GRID, zeroline: false },
      yaxis: { gridcolor: GRID, zeroline: false },
      plot_bgcolor: "#FFFFFF",
      paper_bgcolor: "#FFFFFF",
      font: { family: "system-ui, -apple-system, 'Segoe UI', sans-serif", color: INK, size: 12 },
      showlegend: false,
      shapes,
    };
    plots.push(Plotly.newPlot(div, traces, layout, config));
  }
  return Promise.all(plots);
}

// ----- load -----------------------------------------------------------------------
async function load() {
  const q = params();
  errorBox.hidden = true;
  if (!q.getAll("a").length || !q.getAll("b").length) {
    result.hidden = true;
    reportLink.hidden = true;
    document.body.dataset.loaded = "1";
    return;
  }
  busy.hidden = false;
  try {
    const data = await getJSON(`/api/compare?${q}`);
    const comp = data.comparison;
    result.hidden = false;
    showRuns(comp);
    kpiTable(document.getElementById("kpi-table"), comp.kpis);
    showSegments(comp);
    showLaps(data.laps_shown);
    await charts(data.charts);
    reportLink.href = `/api/compare/report?${q}`;
    reportLink.hidden = false;
    document.body.dataset.loaded = "1";
  } catch (err) {
    result.hidden = true;
    showError(errorBox, err);
    document.body.dataset.loaded = "1";
  } finally {
    busy.hidden = true;
  }
}

window.addEventListener("popstate", () => {
  fillPicker().catch((err) => showError(errorBox, err));
  load();
});

initLayout();
fillPicker()
  .catch((err) => showError(errorBox, err))
  .finally(load);
