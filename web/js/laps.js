// Laps of a multi-lap run on the Run page: a strip of laps above the timelines (click a
// lap to zoom every chart to it), and a card with the per-lap KPIs, each drawn against
// the lap number, and the drift test of each. Values arrive in the units shown (deg for
// the roll error); the page computes nothing.
import { el, fmt } from "./api.js";

const SVG = "http://www.w3.org/2000/svg";

function svg(tag, attrs = {}) {
  const node = document.createElementNS(SVG, tag);
  for (const [k, v] of Object.entries(attrs)) node.setAttribute(k, String(v));
  return node;
}

function lapTitle(lap) {
  const kind = lap.partial ? "partial lap" : "lap";
  return `${kind} ${lap.number}: ${fmt(lap.start_s, 5)}–${fmt(lap.end_s, 5)} s, ${fmt(lap.duration_s, 4)} s, ${fmt(lap.length_m, 4)} m`;
}

// The strip: one button per lap, as wide as the lap lasted.
export function lapStrip(container, laps, onPick) {
  const rows = (laps && laps.laps) || [];
  container.hidden = rows.length === 0;
  if (!rows.length) {
    container.replaceChildren();
    return;
  }
  const bar = el("div", { className: "lap-bar", role: "list" });
  for (const lap of rows) {
    bar.append(
      el(
        "button",
        {
          type: "button",
          role: "listitem",
          className: lap.partial ? "lap partial" : "lap",
          title: lapTitle(lap),
          style: { flexGrow: String(Math.max(lap.duration_s, 0.001)) },
          dataset: { lap: String(lap.number) },
          onclick: () => onPick([lap.start_s, lap.end_s], lap),
        },
        lap.partial ? `(${lap.number})` : String(lap.number),
      ),
    );
  }
  container.replaceChildren(
    el("span", { className: "legend-title" }, "Laps"),
    bar,
    el("span", { className: "lap-facts" }, laps.reason || ""),
  );
}

// A small chart of one KPI against the lap number (complete laps filled, partial hollow).
function lapChart(rows, key) {
  const w = 180;
  const h = 44;
  const pad = 4;
  const pts = rows.filter((r) => r[key] !== null && r[key] !== undefined);
  const node = svg("svg", { width: w, height: h, viewBox: `0 0 ${w} ${h}`, class: "lap-chart", role: "img" });
  if (pts.length < 2) return node;
  const xs = pts.map((r) => r.lap);
  const ys = pts.map((r) => r[key]);
  const [x0, x1] = [Math.min(...xs), Math.max(...xs)];
  let [y0, y1] = [Math.min(...ys), Math.max(...ys)];
  if (y1 === y0) [y0, y1] = [y0 - 1, y1 + 1];
  const X = (x) => pad + ((x - x0) / Math.max(x1 - x0, 1)) * (w - 2 * pad);
  const Y = (y) => h - pad - ((y - y0) / (y1 - y0)) * (h - 2 * pad);
  node.append(svg("polyline", { points: pts.map((r) => `${X(r.lap)},${Y(r[key])}`).join(" "), class: "lap-line" }));
  for (const r of pts) {
    const dot = svg("circle", { cx: X(r.lap), cy: Y(r[key]), r: 2.5, class: r.partial ? "lap-dot partial" : "lap-dot" });
    dot.append(svg("title"));
    dot.firstChild.textContent = `lap ${r.lap}: ${fmt(r[key], 4)}`;
    node.append(dot);
  }
  node.setAttribute("aria-label", `${key} against lap number, laps ${x0} to ${x1}`);
  return node;
}

function driftText(d) {
  if (!d || d.verdict === "not run") return "not run";
  const unit = d.unit && d.unit !== "-" && d.unit !== "count" ? ` ${d.unit}` : "";
  const change = d.change === null || d.change === undefined ? "–" : `${d.change > 0 ? "+" : ""}${fmt(d.change, 3)}${unit}`;
  const p = d.p === null || d.p === undefined ? "too few laps" : `p = ${fmt(d.p, 2)}`;
  return `${d.verdict} (change over the run ${change}, ${p})`;
}

// The card: per-lap table, and one row per KPI with its chart and drift verdict.
export function lapCard(container, laps) {
  const rows = (laps && laps.kpis) || [];
  container.hidden = rows.length === 0;
  if (!rows.length) return;
  const defs = laps.kpi_defs || [];
  const drift = laps.drift || {};
  const trend = el("table", { className: "lap-drift" });
  trend.append(el("thead", {}, el("tr", {}, el("th", {}, "KPI"), el("th", {}, "Against lap number"), el("th", {}, "Drift (Mann–Kendall, 5 % level)"))));
  const tb = el("tbody");
  for (const d of defs) {
    const unit = d.unit && d.unit !== "-" ? ` [${d.unit}]` : "";
    const verdict = (drift[d.key] || {}).verdict || "not run";
    tb.append(
      el(
        "tr",
        { dataset: { kpi: d.key, verdict } },
        el("td", {}, `${d.label}${unit}`),
        el("td", {}, verdict === "not run" ? "not run" : lapChart(rows, d.key)),
        el("td", { className: `verdict ${verdict.replace(" ", "-")}` }, driftText(drift[d.key])),
      ),
    );
  }
  trend.append(tb);
  const table = el("table", { className: "lap-table" });
  const head = el("tr", {}, el("th", { className: "num" }, "Lap"), el("th", { className: "num" }, "Start [s]"));
  for (const d of defs) head.append(el("th", { className: "num", title: d.label }, `${d.label.split(",")[0]}${d.unit && d.unit !== "-" ? ` [${d.unit}]` : ""}`));
  table.append(el("thead", {}, head));
  const body = el("tbody");
  for (const r of rows) {
    const tr = el("tr", { className: r.partial ? "partial" : "" }, el("td", { className: "num" }, r.partial ? `(${r.lap})` : String(r.lap)), el("td", { className: "num" }, fmt(r.start_s, 5)));
    for (const d of defs) tr.append(el("td", { className: "num" }, r[d.key] === null || r[d.key] === undefined ? "not run" : fmt(r[d.key], 4)));
    body.append(tr);
  }
  table.append(body);
  container.replaceChildren(
    el("h2", {}, "Laps"),
    el("p", { className: "hint" }, `${laps.reason} Partial laps (in brackets) are left out of the drift test.`),
    trend,
    el("details", {}, el("summary", {}, "Per-lap table"), table),
  );
}
