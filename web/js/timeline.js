// Stacked timelines on one synchronised time axis.
//
// The server sends a plan (panels -> rows -> traces, by catalogue name) and the
// series, already downsampled to a point budget. One plotly figure per panel,
// one y axis per row; every figure shares the same x range. Zooming or panning
// any figure asks the server, after a short pause, for the visible window again
// (full resolution once it fits the budget) and moves every figure to it in one
// Plotly.react each (a separate relayout first would draw every figure twice).
// The point budget per trace follows the plotted width: about one point per pixel
// column, with MinMaxLTTB on the server keeping each bucket's extremes. A zoom asks
// for every panel's signals in one request.
/* global Plotly */
import { getJSON } from "./api.js";
import { eventColour, kindLabel, TRACE_STYLES } from "./palette.js";

const ROW_HEIGHT = 132; // px per row of a panel
const ROW_GAP = 0.045; // share of the panel height between rows
// Fixed margins, wide enough for the y titles and tick labels: every panel's plot area
// starts at the same x, so the time axes line up, and plotly skips the margin-pushing
// pass (automargin) that made each redraw measure its labels and sometimes draw twice.
const MARGIN = { l: 76, r: 28, t: 28, b: 30 };
const REFRESH_MS = 50; // pause after a zoom before re-requesting the window (collapses key repeats)
const WINDOW_MARGIN = 0.1; // extra share of the window fetched on each side
const POINTS_PER_PX = 1; // point budget per pixel of plotted width
const MIN_POINTS = 200; // budget bounds per trace (the server accepts 10 .. 20000)
const MAX_POINTS = 2000;

// plotly.js (served from the Python package) is large to parse: the page preloads
// the file but runs it only after the data requests are on their way.
const PLOTLY_URL = "/vendor/plotly.min.js";
let plotlyPromise = null;
export function loadPlotly() {
  if (window.Plotly) return Promise.resolve();
  if (!plotlyPromise) {
    plotlyPromise = new Promise((resolve, reject) => {
      const script = document.createElement("script");
      script.src = PLOTLY_URL;
      script.onload = () => resolve();
      script.onerror = () => reject(new Error("plotly.js could not be loaded from the server."));
      document.head.append(script);
    });
  }
  return plotlyPromise;
}

export class Timelines {
  constructor(container, runId, plan, events, { points = null, onWindow = null } = {}) {
    this.container = container;
    this.runId = runId;
    this.panels = plan.filter((p) => p.rows.length);
    this.emptyPanels = plan.filter((p) => !p.rows.length);
    this.events = events;
    this.hiddenKinds = new Set();
    this.points = points;
    this.onWindow = onWindow;
    this.figures = new Map(); // panel id -> div
    this.syncing = false;
    this.timer = null;
    this.request = 0;
    this.fullRange = null;
    this.range = null; // current [t0, t1] or null for the whole run
    this.zoomStarted = 0;
  }

  // Budget per trace: one point per pixel column of the plot area, within bounds.
  budget() {
    if (this.points) return this.points;
    const width = (this.container.clientWidth || 1000) - MARGIN.l - MARGIN.r;
    return Math.max(MIN_POINTS, Math.min(MAX_POINTS, Math.round(width * POINTS_PER_PX)));
  }

  signalsOf(panel) {
    return [...new Set(panel.rows.flatMap((r) => r.traces.map((t) => t.signal)))];
  }

  // ----- data --------------------------------------------------------------
  // One request per panel: the server reads and reduces them in parallel, and each
  // panel is drawn as soon as its data is in.
  async fetchSeries(signals, range) {
    const params = new URLSearchParams({ signals: signals.join(","), points: String(this.budget()) });
    if (range) {
      const pad = (range[1] - range[0]) * WINDOW_MARGIN;
      params.set("t0", String(Math.max(this.fullRange ? this.fullRange[0] : -Infinity, range[0] - pad)));
      params.set("t1", String(Math.min(this.fullRange ? this.fullRange[1] : Infinity, range[1] + pad)));
    }
    return getJSON(`/api/runs/${encodeURIComponent(this.runId)}/series?${params}`);
  }

  // ----- figure construction ------------------------------------------------
  traces(panel, series) {
    const out = [];
    const shown = new Set();
    panel.rows.forEach((row, i) => {
      const yaxis = i === 0 ? "y" : `y${i + 1}`;
      for (const tr of row.traces) {
        const s = series.signals[tr.signal];
        if (!s) continue;
        const style = TRACE_STYLES[tr.style] || TRACE_STYLES.main;
        const legend = `${tr.label}`;
        const base = {
          type: "scatter",
          mode: "lines",
          x: s.t,
          y: s.y,
          xaxis: "x",
          yaxis,
          name: legend,
          legendgroup: legend,
          showlegend: !shown.has(legend),
          line: { color: style.color, width: style.width, dash: style.dash },
          hovertemplate: `${row.label} · ${tr.label}: %{y:.4g} ${tr.unit}<br>t = %{x:.3f} s<extra></extra>`,
          meta: { signal: tr.signal },
        };
        shown.add(legend);
        out.push(base);
        if (tr.mirror) {
          // the limit holds in both directions: draw it below zero too
          out.push({ ...base, y: s.y.map((v) => (v === null ? null : -v)), showlegend: false, hoverinfo: "skip", hovertemplate: undefined });
        }
      }
    });
    return out;
  }

  // Shaded events of a panel; with a window, only those that reach into it (plus its
  // margin): a long run has hundreds, and each shape costs drawing time.
  eventShapes(panel, range = null) {
    const shapes = [];
    const rowOf = new Map(panel.rows.map((r, i) => [r.channel, i]));
    const pad = range ? (range[1] - range[0]) * WINDOW_MARGIN : 0;
    for (const ev of this.events) {
      if (!panel.event_kinds.includes(ev.kind) || this.hiddenKinds.has(ev.kind)) continue;
      if (range && (ev.end_s < range[0] - pad || ev.start_s > range[1] + pad)) continue;
      const i = ev.channel !== null && rowOf.has(ev.channel) ? rowOf.get(ev.channel) : null;
      const yref = i === null ? "paper" : `${i === 0 ? "y" : `y${i + 1}`} domain`;
      const colour = eventColour(ev.kind);
      shapes.push({
        type: "rect",
        xref: "x",
        yref,
        x0: ev.start_s,
        x1: ev.end_s,
        y0: 0,
        y1: 1,
        fillcolor: colour,
        opacity: 0.3,
        line: { color: colour, width: 1 },
        layer: "below",
        name: `event:${ev.kind}`,
      });
    }
    return shapes;
  }

  limitShapes(panel) {
    const shapes = [];
    panel.rows.forEach((row, i) => {
      const yref = i === 0 ? "y" : `y${i + 1}`;
      for (const line of row.lines || []) {
        const values = line.mirror ? [line.y, -line.y] : [line.y];
        values.forEach((y, k) => {
          shapes.push({
            type: "line",
            xref: "x domain",
            yref,
            x0: 0,
            x1: 1,
            y0: y,
            y1: y,
            line: { color: TRACE_STYLES.limit.color, width: 1, dash: "dash" },
            name: "limit",
            label: k === 0 ? { text: line.label, textposition: "end", yanchor: "bottom", font: { size: 10, color: "#4A5A63" } } : undefined,
          });
        });
      }
    });
    return shapes;
  }

  layout(panel, range) {
    const n = panel.rows.length;
    const span = (1 - ROW_GAP * (n - 1)) / n;
    const layout = {
      height: MARGIN.t + MARGIN.b + ROW_HEIGHT * n,
      margin: MARGIN,
      paper_bgcolor: "rgba(0,0,0,0)",
      plot_bgcolor: "#FFFFFF",
      font: { family: "system-ui, -apple-system, 'Segoe UI', sans-serif", size: 11, color: "#24323A" },
      showlegend: true,
      legend: { orientation: "h", x: 0, y: 1, yanchor: "bottom", font: { size: 11 }, bgcolor: "rgba(0,0,0,0)" },
      hovermode: "x unified",
      dragmode: "zoom",
      xaxis: {
        range: range ? [...range] : undefined, // a copy: plotly changes its range in place
        autorange: range ? false : true,
        showgrid: true,
        gridcolor: "#ECEEEA",
        zeroline: false,
        ticksuffix: " s",
        // Redraw savings (measured): no hiding of tick labels past the figure (plotly
        // measures every label to decide) and no guessing the axis type from the data.
        ticklabeloverflow: "allow",
        type: "linear",
        anchor: n === 1 ? "y" : `y${n}`,
      },
      shapes: [...this.eventShapes(panel, this.range), ...this.limitShapes(panel)],
    };
    panel.rows.forEach((row, i) => {
      const top = 1 - i * (span + ROW_GAP);
      const key = i === 0 ? "yaxis" : `yaxis${i + 1}`;
      layout[key] = {
        domain: [Math.max(0, top - span), top],
        anchor: "x",
        title: { text: row.unit ? `${row.label} [${row.unit}]` : row.label, font: { size: 11 } },
        gridcolor: "#ECEEEA",
        zerolinecolor: "#C9CFCB",
        fixedrange: true,
        type: "linear",
        ticklabeloverflow: "allow",
      };
    });
    return layout;
  }

  // ----- drawing ---------------------------------------------------------------
  async draw() {
    this.container.replaceChildren();
    for (const panel of this.panels) {
      const box = document.createElement("div");
      box.className = "panel";
      const title = document.createElement("h3");
      title.textContent = panel.title;
      const legend = document.createElement("div");
      legend.className = "panel-kinds";
      for (const kind of panel.event_kinds) {
        const chip = document.createElement("span");
        chip.className = "kind-chip";
        const sw = document.createElement("span");
        sw.className = "swatch";
        sw.style.background = eventColour(kind);
        chip.append(sw, document.createTextNode(kindLabel(kind)));
        legend.append(chip);
      }
      const chart = document.createElement("div");
      chart.className = "chart";
      chart.id = `chart-${panel.id}`;
      box.append(title, legend, chart);
      this.container.append(box);
      this.figures.set(panel.id, chart);
    }
    for (const panel of this.emptyPanels) {
      const box = document.createElement("div");
      box.className = "panel empty-panel";
      const title = document.createElement("h3");
      title.textContent = panel.title;
      const why = document.createElement("p");
      why.className = "empty";
      why.textContent = panel.empty_reason || "Nothing to draw.";
      box.append(title, why);
      this.container.append(box);
    }
    const requests = this.panels.map((panel) => this.fetchSeries(this.signalsOf(panel), null));
    performance.mark("outrigger:series-asked");
    await loadPlotly();
    performance.mark("outrigger:plotly-loaded");
    const config = { responsive: true, displaylogo: false, scrollZoom: false, modeBarButtonsToRemove: ["select2d", "lasso2d", "autoScale2d"] };
    const all = await Promise.all(requests);
    performance.mark("outrigger:series-in");
    this.fullRange = [Math.min(...all.map((s) => s.t0)), Math.max(...all.map((s) => s.t1))];
    await Promise.all(
      this.panels.map((panel, i) => {
        const div = this.figures.get(panel.id);
        return Plotly.newPlot(div, this.traces(panel, all[i]), this.layout(panel, this.fullRange), config).then(() => {
          performance.mark(`outrigger:drawn-${panel.id}`);
          div.on("plotly_relayout", (ev) => this.onRelayout(panel.id, ev));
        });
      }),
    );
    this.range = null;
    // Time from navigation start to all charts drawn [ms] (read by the benchmark).
    document.body.dataset.chartsReadyMs = String(Math.round(performance.now()));
    document.body.dataset.chartsReady = "1";
    this.announce({ t0: this.fullRange[0], t1: this.fullRange[1] });
  }

  announce(series) {
    document.body.dataset.window = `${series.t0},${series.t1}`;
    if (this.onWindow) this.onWindow(series);
  }

  onRelayout(sourceId, ev) {
    if (this.syncing) return;
    let range = null;
    if (ev["xaxis.range[0]"] !== undefined && ev["xaxis.range[1]"] !== undefined) {
      range = [Number(ev["xaxis.range[0]"]), Number(ev["xaxis.range[1]"])];
    } else if (Array.isArray(ev["xaxis.range"])) {
      range = ev["xaxis.range"].map(Number);
    } else if (ev["xaxis.autorange"]) {
      range = null;
    } else {
      return; // a change that is not about time
    }
    this.setRange(range, sourceId);
  }

  // Move every chart to [t0, t1] (null: the whole run): fetch the window, then one
  // Plotly.react per chart with the new data and range.
  setRange(range, sourceId = null) {
    this.range = range;
    if (!this.zoomStarted) this.zoomStarted = performance.now();
    clearTimeout(this.timer);
    this.timer = setTimeout(() => this.refresh(), REFRESH_MS);
  }

  async refresh() {
    const ticket = ++this.request;
    const range = this.range;
    const started = performance.now();
    // One request for every panel: the server slices its cached columns in one pass,
    // cheaper here than five requests sharing the cores with the browser.
    const signals = [...new Set(this.panels.flatMap((panel) => this.signalsOf(panel)))];
    const one = await this.fetchSeries(signals, range);
    const all = this.panels.map(() => one);
    if (ticket !== this.request) return; // a newer zoom superseded this one
    // The request's share of the zoom [ms] (read by the benchmark).
    document.body.dataset.fetchMs = String(Math.round(performance.now() - started));
    const target = range || this.fullRange;
    this.syncing = true;
    try {
      await Promise.all(
        this.panels.map((panel, i) => {
          const div = this.figures.get(panel.id);
          return Plotly.react(div, this.traces(panel, all[i]), this.layout(panel, target), div._context);
        }),
      );
    } finally {
      this.syncing = false;
    }
    // Request + redraw of a zoom [ms], without the pause before the request, and from the
    // zoom itself to every chart redrawn [ms] (both read by the benchmark).
    const now = performance.now();
    document.body.dataset.refreshMs = String(Math.round(now - started));
    if (this.zoomStarted) document.body.dataset.zoomMs = String(Math.round(now - this.zoomStarted));
    this.zoomStarted = 0;
    this.announce({ t0: all[0].t0, t1: all[0].t1 });
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
      const div = this.figures.get(panel.id);
      Plotly.relayout(div, { shapes: [...this.eventShapes(panel, this.range), ...this.limitShapes(panel)] });
    }
  }
}
