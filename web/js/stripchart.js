// Strip charts drawn on a canvas: rows stacked on one time axis, line traces, shaded
// time bands (events) and horizontal limit lines, with drag-to-zoom, shift-drag to
// pan, double-click for the whole run, and a crosshair with the values under it.
//
// Written for the Run page, whose two speed targets (first full draw, zoom round
// trip) a general-purpose SVG plotting library missed on the field laptops we test
// on: a canvas redraw of every timeline takes a few milliseconds, and the page no
// longer waits for a multi-megabyte script to compile. It does one job: lines of a
// few thousand points each, already reduced by the server to about one point per
// pixel column.
//
// Text on the canvas comes from the server's chart plan (labels, units); the hover
// box is filled with textContent, never HTML.

import { ticksWithin, tickLabel } from "./ticks.js";

const FONT = "11px system-ui, -apple-system, 'Segoe UI', sans-serif";
const SMALL_FONT = "10px system-ui, -apple-system, 'Segoe UI', sans-serif";
const INK = "#24323A";
const SOFT_INK = "#4A5A63";
const GRID = "#ECEEEA";
const ZERO = "#C9CFCB";
const PLOT_BG = "#FFFFFF";
const BAND_ALPHA = 0.3;
const MIN_BAND_PX = 2; // an event shorter than a pixel still shows
const DRAG_PX = 4; // movement below this is a click, not a zoom
const Y_PAD = 0.06; // share of the data span added above and below

// Index of the last x <= t in a sorted array (-1 if none).
function lastAtOrBefore(x, t) {
  let lo = 0;
  let hi = x.length - 1;
  if (hi < 0 || x[0] > t) return -1;
  while (lo < hi) {
    const mid = (lo + hi + 1) >> 1;
    if (x[mid] <= t) lo = mid;
    else hi = mid - 1;
  }
  return lo;
}

function dashOf(dash, width) {
  if (dash === "dot") return [Math.max(1, width), 2.5 * width + 1];
  if (dash === "dash") return [5, 4];
  return [];
}

export class StripChart {
  // rows: [{label, unit}]; options: {label (for screen readers), margin, rowHeight,
  // rowGap, xSuffix, onZoom(range|null), onHover(t|null)}
  constructor(host, rows, options = {}) {
    this.host = host;
    this.rows = rows;
    this.margin = options.margin || { l: 76, r: 28, t: 8, b: 26 };
    this.rowHeight = options.rowHeight || 132;
    this.rowGap = options.rowGap || 14;
    this.xSuffix = options.xSuffix ?? " s";
    this.onZoom = options.onZoom || null;
    this.onHover = options.onHover || null;
    this.traces = [];
    this.bands = [];
    this.lines = [];
    this.range = [0, 1];
    this.drawn = { traces: 0, points: 0, bands: 0, lines: 0 };
    this.drag = null;
    this.crosshair = null;
    this.hasData = false;

    host.classList.add("strip-chart");
    host.stripChart = this;
    this.canvas = document.createElement("canvas");
    this.canvas.className = "strip-main";
    this.canvas.setAttribute("role", "img");
    this.canvas.setAttribute("aria-label", options.label || rows.map((r) => r.label).join(", "));
    this.overlay = document.createElement("canvas");
    this.overlay.className = "strip-overlay";
    this.overlay.setAttribute("aria-hidden", "true");
    this.tip = document.createElement("div");
    this.tip.className = "strip-tip";
    this.tip.hidden = true;
    const box = document.createElement("div");
    box.className = "strip-box";
    box.append(this.canvas, this.overlay, this.tip);
    host.append(box);
    this.box = box;
    this.height = this.margin.t + this.margin.b + rows.length * this.rowHeight + (rows.length - 1) * this.rowGap;
    box.style.height = `${this.height}px`;
    this.listen();
    this.resizer = new ResizeObserver(() => this.resize());
    this.resizer.observe(box);
  }

  // ----- geometry --------------------------------------------------------------------
  // CSS width, read from the layout once per resize (reading it per point made
  // drawing 20 times slower: every read is a call into the layout engine).
  get width() {
    if (!this.cssWidth) this.cssWidth = this.box.clientWidth || 600;
    return this.cssWidth;
  }

  plotLeft() {
    return this.margin.l;
  }

  plotRight() {
    return this.width - this.margin.r;
  }

  rowTop(i) {
    return this.margin.t + i * (this.rowHeight + this.rowGap);
  }

  xOf(t) {
    const [a, b] = this.range;
    return this.plotLeft() + ((t - a) / (b - a)) * (this.plotRight() - this.plotLeft());
  }

  // Time under a pixel column (CSS px from the chart's left edge).
  timeAt(px) {
    const [a, b] = this.range;
    return a + ((px - this.plotLeft()) / (this.plotRight() - this.plotLeft())) * (b - a);
  }

  // Match the canvases' pixels to their CSS size (once per size change).
  fitCanvas() {
    const dpr = window.devicePixelRatio || 1;
    const w = Math.max(1, Math.round(this.width * dpr));
    const h = Math.max(1, Math.round(this.height * dpr));
    for (const c of [this.canvas, this.overlay]) {
      if (c.width !== w || c.height !== h) {
        c.width = w;
        c.height = h;
      }
    }
  }

  resize() {
    this.cssWidth = this.box.clientWidth || 600;
    this.fitCanvas();
    if (this.hasData) this.draw(); // nothing to draw before the first data
  }

  // ----- data ------------------------------------------------------------------------
  // traces: [{row, x, y, color, width, dash, name, unit, mirror}] (y null or NaN: a
  // gap; mirror: a negative copy left out of the hover box);
  // bands: [{row|null, x0, x1, color, kind}]; lines: [{row, y, label}]; range: [t0, t1].
  setData({ traces, bands, lines, range }) {
    this.hasData = true;
    this.traces = traces;
    this.bands = bands;
    this.lines = lines;
    this.range = [Number(range[0]), Number(range[1])];
    if (!(this.range[1] > this.range[0])) this.range[1] = this.range[0] + 1;
  }

  setBands(bands) {
    this.bands = bands;
  }

  // y span of row i over the visible window: its traces and its limit lines.
  yRange(i) {
    const [a, b] = this.range;
    let lo = Infinity;
    let hi = -Infinity;
    for (const tr of this.traces) {
      if (tr.row !== i) continue;
      const { x, y } = tr;
      const start = Math.max(0, lastAtOrBefore(x, a));
      for (let k = start; k < x.length; k++) {
        const v = y[k];
        if (v !== null && v === v) {
          if (v < lo) lo = v;
          if (v > hi) hi = v;
        }
        if (x[k] > b) break;
      }
    }
    for (const line of this.lines) {
      if (line.row !== i) continue;
      lo = Math.min(lo, line.y);
      hi = Math.max(hi, line.y);
    }
    if (!Number.isFinite(lo)) return [0, 1];
    if (hi - lo < 1e-12) {
      const d = Math.abs(hi) > 1e-12 ? Math.abs(hi) * 0.1 : 1;
      return [lo - d, hi + d];
    }
    const pad = (hi - lo) * Y_PAD;
    return [lo - pad, hi + pad];
  }

  // ----- drawing -----------------------------------------------------------------------
  draw() {
    this.fitCanvas();
    const ctx = this.canvas.getContext("2d");
    const dpr = this.canvas.width / this.width;
    ctx.setTransform(dpr, 0, 0, dpr, 0, 0);
    ctx.clearRect(0, 0, this.width, this.height);
    const left = this.plotLeft();
    const right = this.plotRight();
    const drawn = { traces: 0, points: 0, bands: 0, lines: 0 };
    const xt = ticksWithin(this.range[0], this.range[1], Math.max(3, Math.round((right - left) / 110)));
    this.rows.forEach((row, i) => {
      const top = this.rowTop(i);
      const bottom = top + this.rowHeight;
      const [y0, y1] = this.yRange(i);
      const yOf = (v) => bottom - ((v - y0) / (y1 - y0)) * this.rowHeight;
      ctx.fillStyle = PLOT_BG;
      ctx.fillRect(left, top, right - left, this.rowHeight);
      // grid
      ctx.lineWidth = 1;
      ctx.strokeStyle = GRID;
      ctx.beginPath();
      for (const t of xt.values) {
        const px = Math.round(this.xOf(t)) + 0.5;
        ctx.moveTo(px, top);
        ctx.lineTo(px, bottom);
      }
      const yt = ticksWithin(y0, y1, Math.max(2, Math.round(this.rowHeight / 34)));
      for (const v of yt.values) {
        const py = Math.round(yOf(v)) + 0.5;
        ctx.moveTo(left, py);
        ctx.lineTo(right, py);
      }
      ctx.stroke();
      if (y0 < 0 && y1 > 0) {
        ctx.strokeStyle = ZERO;
        ctx.beginPath();
        const py = Math.round(yOf(0)) + 0.5;
        ctx.moveTo(left, py);
        ctx.lineTo(right, py);
        ctx.stroke();
      }
      // y tick labels and title
      ctx.font = FONT;
      ctx.fillStyle = INK;
      ctx.textAlign = "right";
      ctx.textBaseline = "middle";
      for (const v of yt.values) ctx.fillText(tickLabel(v, yt.step), left - 5, yOf(v));
      ctx.save();
      ctx.translate(12, top + this.rowHeight / 2);
      ctx.rotate(-Math.PI / 2);
      ctx.textAlign = "center";
      ctx.fillText(row.unit ? `${row.label} [${row.unit}]` : row.label, 0, 0);
      ctx.restore();

      ctx.save();
      ctx.beginPath();
      ctx.rect(left, top, right - left, this.rowHeight);
      ctx.clip();
      drawn.bands += this.drawBands(ctx, i, top, bottom);
      for (const tr of this.traces) {
        if (tr.row !== i) continue;
        const n = this.drawTrace(ctx, tr, yOf);
        if (n > 1) drawn.traces += 1;
        drawn.points += n;
      }
      for (const line of this.lines) {
        if (line.row !== i) continue;
        const py = Math.round(yOf(line.y)) + 0.5;
        ctx.strokeStyle = SOFT_INK;
        ctx.lineWidth = 1;
        ctx.setLineDash(dashOf("dash", 1));
        ctx.beginPath();
        ctx.moveTo(left, py);
        ctx.lineTo(right, py);
        ctx.stroke();
        ctx.setLineDash([]);
        if (line.label) {
          ctx.font = SMALL_FONT;
          ctx.fillStyle = SOFT_INK;
          ctx.textAlign = "right";
          // above the line, or below it when the line runs along the top of the row
          const above = py - 13 > top;
          ctx.textBaseline = above ? "bottom" : "top";
          ctx.fillText(line.label, right - 4, above ? py - 2 : py + 2);
        }
        drawn.lines += 1;
      }
      ctx.restore();
      ctx.strokeStyle = ZERO;
      ctx.lineWidth = 1;
      ctx.strokeRect(left + 0.5, top + 0.5, right - left - 1, this.rowHeight - 1);
    });
    // time axis under the last row
    const base = this.rowTop(this.rows.length - 1) + this.rowHeight;
    ctx.font = FONT;
    ctx.fillStyle = INK;
    ctx.textAlign = "center";
    ctx.textBaseline = "top";
    for (const t of xt.values) ctx.fillText(tickLabel(t, xt.step, this.xSuffix), this.xOf(t), base + 5);
    this.drawn = drawn;
    this.host.dataset.range = `${this.range[0]},${this.range[1]}`;
    this.drawOverlay();
  }

  drawBands(ctx, i, top, bottom) {
    let count = 0;
    const [a, b] = this.range;
    ctx.globalAlpha = BAND_ALPHA;
    for (const band of this.bands) {
      if (band.row !== null && band.row !== i) continue;
      if (band.x1 < a || band.x0 > b) continue;
      let x0 = this.xOf(band.x0);
      let x1 = this.xOf(band.x1);
      if (x1 - x0 < MIN_BAND_PX) {
        const mid = (x0 + x1) / 2;
        x0 = mid - MIN_BAND_PX / 2;
        x1 = mid + MIN_BAND_PX / 2;
      }
      ctx.fillStyle = band.color;
      ctx.fillRect(x0, top, x1 - x0, bottom - top);
      count += 1;
    }
    ctx.globalAlpha = 1;
    return count;
  }

  // One polyline, broken at gaps; only the visible stretch (plus a sample each side).
  drawTrace(ctx, tr, yOf) {
    const { x, y } = tr;
    const [a, b] = this.range;
    const start = Math.max(0, lastAtOrBefore(x, a));
    ctx.strokeStyle = tr.color;
    ctx.lineWidth = tr.width;
    ctx.lineJoin = "bevel"; // measured: round joins made stroking dense traces 5x slower
    ctx.setLineDash(dashOf(tr.dash, tr.width));
    ctx.beginPath();
    let pen = false;
    let n = 0;
    for (let k = start; k < x.length; k++) {
      const v = y[k];
      if (v === null || v !== v) {
        pen = false;
      } else {
        const px = this.xOf(x[k]);
        const py = yOf(v);
        if (pen) ctx.lineTo(px, py);
        else ctx.moveTo(px, py);
        pen = true;
        n += 1;
      }
      if (x[k] > b) break;
    }
    ctx.stroke();
    ctx.setLineDash([]);
    return n;
  }

  // Selection rectangle while dragging, and the crosshair.
  drawOverlay() {
    const ctx = this.overlay.getContext("2d");
    const dpr = this.overlay.width / this.width;
    ctx.setTransform(dpr, 0, 0, dpr, 0, 0);
    ctx.clearRect(0, 0, this.width, this.height);
    const top = this.margin.t;
    const bottom = this.rowTop(this.rows.length - 1) + this.rowHeight;
    if (this.drag && this.drag.mode === "zoom" && Math.abs(this.drag.x - this.drag.x0) >= DRAG_PX) {
      const x0 = Math.min(this.drag.x, this.drag.x0);
      const w = Math.abs(this.drag.x - this.drag.x0);
      ctx.fillStyle = "rgba(36, 50, 58, 0.12)";
      ctx.fillRect(x0, top, w, bottom - top);
      ctx.strokeStyle = "rgba(36, 50, 58, 0.6)";
      ctx.strokeRect(x0 + 0.5, top + 0.5, w - 1, bottom - top - 1);
    }
    if (this.crosshair !== null) {
      const px = Math.round(this.xOf(this.crosshair)) + 0.5;
      if (px >= this.plotLeft() && px <= this.plotRight()) {
        ctx.strokeStyle = "rgba(36, 50, 58, 0.55)";
        ctx.lineWidth = 1;
        ctx.beginPath();
        ctx.moveTo(px, top);
        ctx.lineTo(px, bottom);
        ctx.stroke();
      }
    }
  }

  showCrosshair(t) {
    this.crosshair = t;
    this.drawOverlay();
  }

  // ----- pointer -----------------------------------------------------------------------
  localX(ev) {
    return ev.clientX - this.overlay.getBoundingClientRect().left;
  }

  inPlot(px) {
    return px >= this.plotLeft() && px <= this.plotRight();
  }

  listen() {
    const el = this.overlay;
    el.addEventListener("pointerdown", (ev) => {
      if (ev.button !== 0) return;
      const px = this.localX(ev);
      if (!this.inPlot(px)) return;
      el.setPointerCapture(ev.pointerId);
      this.drag = { x0: px, x: px, mode: ev.shiftKey ? "pan" : "zoom", range: [...this.range] };
      ev.preventDefault();
    });
    el.addEventListener("pointermove", (ev) => {
      const px = this.localX(ev);
      if (this.drag) {
        this.drag.x = px;
        if (this.drag.mode === "pan") {
          const dt = ((px - this.drag.x0) / (this.plotRight() - this.plotLeft())) * (this.drag.range[1] - this.drag.range[0]);
          this.range = [this.drag.range[0] - dt, this.drag.range[1] - dt];
          this.draw();
        } else {
          this.drawOverlay();
        }
        return;
      }
      this.hover(ev, px);
    });
    el.addEventListener("pointerup", (ev) => {
      const drag = this.drag;
      this.drag = null;
      if (!drag) return;
      const moved = Math.abs(this.localX(ev) - drag.x0) >= DRAG_PX;
      if (drag.mode === "pan") {
        if (moved && this.onZoom) this.onZoom([...this.range]);
      } else if (moved) {
        const a = this.timeAt(Math.max(this.plotLeft(), Math.min(drag.x0, drag.x)));
        const b = this.timeAt(Math.min(this.plotRight(), Math.max(drag.x0, drag.x)));
        if (b > a && this.onZoom) this.onZoom([a, b]);
      }
      this.drawOverlay();
    });
    el.addEventListener("pointercancel", () => {
      this.drag = null;
      this.drawOverlay();
    });
    el.addEventListener("dblclick", () => {
      if (this.onZoom) this.onZoom(null);
    });
    el.addEventListener("pointerleave", () => {
      this.tip.hidden = true;
      if (this.onHover) this.onHover(null);
      else this.showCrosshair(null);
    });
  }

  // The values of this chart's traces at the sample nearest the pointer.
  valuesAt(t) {
    const out = [];
    for (const tr of this.traces) {
      if (tr.mirror) continue; // the negative copy of a two-sided limit says nothing new
      const { x, y } = tr;
      let k = lastAtOrBefore(x, t);
      if (k < 0) k = 0;
      if (k + 1 < x.length && Math.abs(x[k + 1] - t) < Math.abs(x[k] - t)) k += 1;
      if (k >= x.length) continue;
      const v = y[k];
      out.push({ row: tr.row, name: tr.name, unit: tr.unit, t: x[k], value: v === null || v !== v ? null : v });
    }
    return out;
  }

  hover(ev, px) {
    if (!this.inPlot(px) || !this.traces.length) {
      this.tip.hidden = true;
      if (this.onHover) this.onHover(null);
      return;
    }
    const t = this.timeAt(px);
    if (this.onHover) this.onHover(t);
    else this.showCrosshair(t);
    const values = this.valuesAt(t);
    const lines = [`t = ${t.toFixed(3)} s`];
    for (const v of values) {
      const row = this.rows[v.row];
      const shown = v.value === null ? "no data" : `${Number(v.value.toPrecision(3))} ${v.unit || ""}`.trim();
      lines.push(`${row ? row.label : ""} · ${v.name}: ${shown}`);
    }
    this.tip.replaceChildren(...lines.map((text) => Object.assign(document.createElement("div"), { textContent: text })));
    this.tip.hidden = false;
    const y = ev.clientY - this.overlay.getBoundingClientRect().top;
    const boxWidth = this.tip.offsetWidth || 200;
    const left = px + 14 + boxWidth > this.width ? px - 14 - boxWidth : px + 14;
    this.tip.style.left = `${Math.max(0, left)}px`;
    this.tip.style.top = `${Math.max(0, Math.min(y + 10, this.height - (this.tip.offsetHeight || 0)))}px`;
  }

  // The chart as a PNG data URL (white background, for reports and tickets). With a
  // header {lines: [text, ...], legend: [{label, color, dash, box}]} the image carries
  // those lines (title, run id, time window) and the legend above the chart.
  toPNG(header = null) {
    const ratio = this.canvas.width / Math.max(1, this.width);
    const lineH = Math.round(18 * ratio);
    const lines = header ? header.lines || [] : [];
    const legend = header ? header.legend || [] : [];
    const top = header ? Math.round((lines.length + (legend.length ? 1 : 0)) * lineH + 8 * ratio) : 0;
    const out = document.createElement("canvas");
    out.width = this.canvas.width;
    out.height = this.canvas.height + top;
    const ctx = out.getContext("2d");
    ctx.fillStyle = "#FFFFFF";
    ctx.fillRect(0, 0, out.width, out.height);
    ctx.textBaseline = "middle";
    let y = Math.round(lineH / 2 + 4 * ratio);
    lines.forEach((text, i) => {
      ctx.font = `${i === 0 ? "600 " : ""}${Math.round(13 * ratio)}px system-ui, sans-serif`;
      ctx.fillStyle = i === 0 ? "#24323A" : "#4A5A63";
      ctx.fillText(text, 8 * ratio, y);
      y += lineH;
    });
    if (legend.length) {
      ctx.font = `${Math.round(12 * ratio)}px system-ui, sans-serif`;
      let x = 8 * ratio;
      for (const item of legend) {
        if (item.box) {
          ctx.fillStyle = item.color;
          ctx.fillRect(x, y - 5 * ratio, 10 * ratio, 10 * ratio);
        } else {
          ctx.strokeStyle = item.color;
          ctx.lineWidth = 2 * ratio;
          ctx.setLineDash(item.dash === "dot" ? [2 * ratio, 3 * ratio] : item.dash === "dash" ? [6 * ratio, 4 * ratio] : []);
          ctx.beginPath();
          ctx.moveTo(x, y);
          ctx.lineTo(x + 18 * ratio, y);
          ctx.stroke();
          ctx.setLineDash([]);
        }
        x += (item.box ? 14 : 22) * ratio;
        ctx.fillStyle = "#24323A";
        ctx.fillText(item.label, x, y);
        x += ctx.measureText(item.label).width + 14 * ratio;
      }
    }
    ctx.drawImage(this.canvas, 0, top);
    return out.toDataURL("image/png");
  }
}
