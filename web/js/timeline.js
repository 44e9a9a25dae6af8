// Stacked timelines on one synchronised time axis.
//
// The server sends a plan (panels -> rows -> traces, by catalogue name) and the
// series, already downsampled to a point budget. Each panel is one strip chart
// (js/stripchart.js, canvas), one row per plan row; every chart shows the same time
// window. Dragging across any chart zooms all of them, shift-drag pans, a double
// click goes back to the whole run; after a short pause the page asks the server for
// the visible window again (full resolution once it fits the budget) in one request
// for every panel. The point budget per trace follows the plotted width: about one
// point per pixel column, with MinMaxLTTB on the server keeping each bucket's
// extremes.
import { el, getJSON } from "./api.js";
import { eventColour, kindLabel, TRACE_STYLES } from "./palette.js";
import { StripChart } from "./stripchart.js";

const ROW_HEIGHT = 132; // px per row of a panel
const ROW_GAP = 14; // px between rows
// Fixed margins, wide enough for the y titles and tick labels: every panel's plot area
// starts at the same x, so the time axes line up.
const MARGIN = { l: 76, r: 28, t: 8, b: 26 };
const REFRESH_MS = 50; // pause after a zoom before re-requesting the window (collapses key repeats)
const WINDOW_MARGIN = 0.1; // extra share of the window fetched on each side
const POINTS_PER_PX = 1; // point budget per pixel of plotted width
const MIN_POINTS = 200; // budget bounds per trace (the server accepts 10 .. 20000)
const MAX_POINTS = 2000;
const MIN_SPAN_S = 0.05; // narrowest window a zoom may ask for [s]

export class Timelines {
  // onWindow(series): after each fetch; onRange(range|null): when the shown window changes.
  constructor(container, runId, plan, events, { points = null, onWindow = null, onRange = null } = {}) {
    this.container = container;
    this.runId = runId;
    this.panels = plan.filter((p) => p.rows.length);
    this.emptyPanels = plan.filter((p) => !p.rows.length);
    this.events = events;
    this.hiddenKinds = new Set();
    this.points = points;
    this.onWindow = onWindow;
    this.onRange = onRange;
    this.charts = new Map(); // panel id -> StripChart
    this.series = null; // the last series answer (every panel's signals)
    this.timer = null;
    this.request = 0;
    this.fullRange = null;
    this.range = null; // current [t0, t1] or null for the whole run
    this.zoomStarted = 0;
    container.timelines = this; // for the browser tests and the benchmark
  }

  // Budget per trace: one point per pixel column of the plot area, within bounds.
  budget() {
    if (this.points) return this.points;
    const width = (this.container.clientWidth || 1000) - MARGIN.l - MARGIN.r;
    return Math.max(MIN_POINTS, Math.min(MAX_POINTS, Math.round(width * POINTS_PER_PX)));
  }

  signals() {
    return [...new Set(this.panels.flatMap((panel) => panel.rows.flatMap((r) => r.traces.map((t) => t.signal))))];
  }

  // ----- data --------------------------------------------------------------
  async fetchSeries(range) {
    const params = new URLSearchParams({ signals: this.signals().join(","), points: String(this.budget()) });
    if (range) {
      const pad = (range[1] - range[0]) * WINDOW_MARGIN;
      params.set("t0", String(Math.max(this.fullRange ? this.fullRange[0] : -Infinity, range[0] - pad)));
      params.set("t1", String(Math.min(this.fullRange ? this.fullRange[1] : Infinity, range[1] + pad)));
    }
    return getJSON(`/api/runs/${encodeURIComponent(this.runId)}/series?${params}`);
  }

  // ----- chart content ------------------------------------------------------------
  traces(panel, series) {
    const out = [];
    panel.rows.forEach((row, i) => {
      for (const tr of row.traces) {
        const s = series.signals[tr.signal];
        if (!s) continue;
        const style = TRACE_STYLES[tr.style] || TRACE_STYLES.main;
        const base = { row: i, x: s.t, y: s.y, name: tr.label, unit: tr.unit, signal: tr.signal, color: style.color, width: style.width, dash: style.dash };
        out.push(base);
        if (tr.mirror) {
          // the limit holds in both directions: draw it below zero too
          out.push({ ...base, y: s.y.map((v) => (v === null ? null : -v)), mirror: true });
        }
      }
    });
    return out;
  }

  // Shaded events of a panel, on the row of their channel (or across the panel).
  bands(panel) {
    const rowOf = new Map(panel.rows.map((r, i) => [r.channel, i]));
    const out = [];
    for (const ev of this.events) {
      if (!panel.event_kinds.includes(ev.kind) || this.hiddenKinds.has(ev.kind)) continue;
      const row = ev.channel !== null && rowOf.has(ev.channel) ? rowOf.get(ev.channel) : null;
      out.push({ row, x0: ev.start_s, x1: ev.end_s, color: eventColour(ev.kind), kind: ev.kind });
    }
    return out;
  }

  limitLines(panel) {
    const out = [];
    panel.rows.forEach((row, i) => {
      for (const line of row.lines || []) {
        out.push({ row: i, y: line.y, label: line.label });
        if (line.mirror) out.push({ row: i, y: -line.y, label: "" });
      }
    });
    return out;
  }

  // What a saved PNG carries above the chart: the panel title, the run id, the time
  // window shown, and the legend of traces and event kinds.
  pngHeader(panel) {
    const range = this.shown ? this.shown() : null;
    const window = range ? `time ${range[0].toFixed(2)} – ${range[1].toFixed(2)} s` : "whole run";
    const traces = [...new Map(panel.rows.flatMap((r) => r.traces).map((tr) => [tr.label, tr])).values()];
    const legend = [
      ...traces.map((tr) => {
        const style = TRACE_STYLES[tr.style] || TRACE_STYLES.main;
        return { label: tr.label, color: style.color, dash: style.dash };
      }),
      ...panel.event_kinds.map((kind) => ({ label: kindLabel(kind), color: eventColour(kind), box: true })),
    ];
    return { lines: [panel.title, `run ${this.runId} · ${window}`], legend };
  }

  // ----- drawing ---------------------------------------------------------------
  panelBox(panel) {
    const kinds = el(
      "div",
      { className: "panel-kinds" },
      ...panel.event_kinds.map((kind) => el("span", { className: "kind-chip" }, el("span", { className: "swatch", style: { background: eventColour(kind) } }), kindLabel(kind))),
    );
    const labels = [...new Map(panel.rows.flatMap((r) => r.traces).map((tr) => [tr.label, tr])).values()];
    const keys = el(
      "div",
      { className: "trace-keys" },
      ...labels.map((tr) => {
        const style = TRACE_STYLES[tr.style] || TRACE_STYLES.main;
        return el("span", { className: "trace-key" }, el("span", { className: `line-swatch ${style.dash}`, style: { borderTopColor: style.color } }), tr.label);
      }),
    );
    const png = () => {
      const a = el("a", { href: this.charts.get(panel.id).toPNG(this.pngHeader(panel)), download: `${this.runId}-${panel.id}.png` });
      a.click();
    };
    const tools = el(
      "div",
      { className: "panel-tools" },
      el("button", { type: "button", className: "button quiet small", onclick: () => this.setRange(null) }, "Whole run"),
      el("button", { type: "button", className: "button quiet small", title: "Save this chart as an image", onclick: png }, "PNG"),
    );
    const chart = el("div", { className: "chart", id: `chart-${panel.id}` });
    const box = el("div", { className: "panel" }, el("div", { className: "panel-head" }, el("h3", {}, panel.title), kinds, keys, tools), chart);
    return { box, chart };
  }

  async draw() {
    this.container.replaceChildren();
    const request = this.fetchSeries(null);
    performance.mark("outrigger:series-asked");
    for (const panel of this.panels) {
      const { box, chart } = this.panelBox(panel);
      this.container.append(box);
      const strip = new StripChart(chart, panel.rows.map((r) => ({ label: r.label, unit: r.unit })), {
        label: `${panel.title}: timeline chart; the event list beside it names every shaded interval`,
        margin: MARGIN,
        rowHeight: ROW_HEIGHT,
        rowGap: ROW_GAP,
        onZoom: (range) => this.setRange(range),
        onHover: (t) => this.crosshair(t),
      });
      this.charts.set(panel.id, strip);
    }
    for (const panel of this.emptyPanels) {
      this.container.append(
        el("div", { className: "panel empty-panel" }, el("h3", {}, panel.title), el("p", { className: "empty" }, panel.empty_reason || "Nothing to draw.")),
      );
    }
    const series = await request;
    performance.mark("outrigger:series-in");
    this.fullRange = [series.t0, series.t1];
    this.range = null;
    this.render(series, this.fullRange);
    // Time from navigation start to all charts drawn [ms] (read by the benchmark).
    document.body.dataset.chartsReadyMs = String(Math.round(performance.now()));
    document.body.dataset.chartsReady = "1";
    this.announce(series);
  }

  render(series, range) {
    this.series = series;
    for (const panel of this.panels) {
      const chart = this.charts.get(panel.id);
      chart.setData({ traces: this.traces(panel, series), bands: this.bands(panel), lines: this.limitLines(panel), range });
      chart.draw();
    }
  }

  crosshair(t) {
    for (const chart of this.charts.values()) chart.showCrosshair(t);
  }

  announce(series) {
    document.body.dataset.window = `${series.t0},${series.t1}`;
    if (this.onWindow) this.onWindow(series);
  }

  // The window shown now: [t0, t1].
  shown() {
    return this.range || this.fullRange;
  }

  // Move every chart to [t0, t1] (null: the whole run). The charts move at once with
  // the data they hold; after a short pause the window is fetched and drawn again.
  setRange(range) {
    if (range && this.fullRange) {
      let [a, b] = range;
      if (b - a < MIN_SPAN_S) {
        const mid = (a + b) / 2;
        a = mid - MIN_SPAN_S / 2;
        b = mid + MIN_SPAN_S / 2;
      }
      range = [a, b];
    }
    this.range = range;
    this.request += 1; // a window still on its way is for an older range: drop it
    if (this.onRange) this.onRange(range);
    if (!this.zoomStarted) this.zoomStarted = performance.now();
    if (this.series) {
      const target = range || this.fullRange;
      for (const chart of this.charts.values()) {
        chart.range = [...target];
        chart.draw();
      }
    }
    clearTimeout(this.timer);
    this.timer = setTimeout(() => this.refresh(), REFRESH_MS);
  }

  // Zoom by a factor around the window's centre (2: twice as wide).
  zoomBy(factor) {
    const [a, b] = this.shown() || [0, 1];
    const mid = (a + b) / 2;
    const half = ((b - a) * factor) / 2;
    this.setRange(this.clamp([mid - half, mid + half]));
  }

  // Pan by a share of the window (positive: later).
  panBy(share) {
    const [a, b] = this.shown() || [0, 1];
    const d = (b - a) * share;
    this.setRange(this.clamp([a + d, b + d]));
  }

  clamp([a, b]) {
    if (!this.fullRange) return [a, b];
    const [lo, hi] = this.fullRange;
    if (b - a >= hi - lo) return null;
    if (a < lo) return [lo, lo + (b - a)];
    if (b > hi) return [hi - (b - a), hi];
    return [a, b];
  }

  async refresh() {
    const ticket = ++this.request;
    const range = this.range;
    const started = performance.now();
    const series = await this.fetchSeries(range);
    if (ticket !== this.request) return; // a newer zoom superseded this one
    // The request's share of the zoom [ms] (read by the benchmark).
    document.body.dataset.fetchMs = String(Math.round(performance.now() - started));
    this.render(series, range || this.fullRange);
    // Request + redraw of a zoom [ms], without the pause before the request, and from the
    // zoom itself to every chart redrawn [ms] (both read by the benchmark).
    const now = performance.now();
    document.body.dataset.refreshMs = String(Math.round(now - started));
    if (this.zoomStarted) document.body.dataset.zoomMs = String(Math.round(now - this.zoomStarted));
    this.zoomStarted = 0;
    this.announce(series);
  }

  zoomToEvent(ev) {
    const duration = Math.max(ev.end_s - ev.start_s, 0);
    const pad = Math.max(1.0, duration * 0.75); // context on both sides [s]
    let t0 = ev.start_s - pad;
    let t1 = ev.end_s + pad;
    if (this.fullRange) {
      t0 = Math.max(this.fullRange[0], t0);
      t1 = Math.min(this.fullRange[1], t1);
    }
    this.setRange([t0, t1]);
  }

  setKindVisible(kind, visible) {
    if (visible) this.hiddenKinds.delete(kind);
    else this.hiddenKinds.add(kind);
    for (const panel of this.panels) {
      const chart = this.charts.get(panel.id);
      chart.setBands(this.bands(panel));
      chart.draw();
    }
  }
}
