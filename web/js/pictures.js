// Run page pictures: the course map (dead-reckoned path coloured by a series, events on
// it, linked with the timelines), the actuator envelope (operating points as a density
// with the motor's limits) and the calibration check. Everything drawn on canvases of
// our own; values come from the server in display units, the page computes no physics.
import { el, fmt, getJSON, showError } from "./api.js";
import { eventColour } from "./palette.js";

// Viridis (S. van der Walt and N. Smith, matplotlib's default colour map, 2015): a
// perceptually uniform, colour-blind-safe scale. Nine anchors, from memory, linear between.
const VIRIDIS = ["#440154", "#482878", "#3e4989", "#31688e", "#26828e", "#1f9e89", "#35b779", "#6ece58", "#fde725"];
const ANCHORS = VIRIDIS.map((h) => [1, 3, 5].map((i) => parseInt(h.slice(i, i + 2), 16)));

export function viridis(u) {
  const x = Math.min(1, Math.max(0, u)) * (ANCHORS.length - 1);
  const i = Math.min(ANCHORS.length - 2, Math.floor(x));
  const f = x - i;
  const c = ANCHORS[i].map((a, k) => Math.round(a + f * (ANCHORS[i + 1][k] - a)));
  return `rgb(${c[0]}, ${c[1]}, ${c[2]})`;
}

function setupCanvas(canvas, height) {
  const ratio = window.devicePixelRatio || 1;
  const width = canvas.parentElement.clientWidth || 600;
  canvas.width = Math.round(width * ratio);
  canvas.height = Math.round(height * ratio);
  canvas.style.width = `${width}px`;
  canvas.style.height = `${height}px`;
  const ctx = canvas.getContext("2d");
  ctx.setTransform(ratio, 0, 0, ratio, 0, 0);
  return { ctx, width, height };
}

// ----- course map ------------------------------------------------------------------------------

class CourseMap {
  constructor(root, runId, timelines) {
    this.runId = runId;
    this.timelines = timelines;
    this.range = null;
    this.data = null;
    this.select = el("select", { id: "map-colour", ariaLabel: "Colour the path by" });
    this.canvas = el("canvas", { id: "course-map", role: "img", ariaLabel: "Course map" });
    this.canvas.picture = this; // for the browser tests
    this.readout = el("span", { className: "map-readout" });
    this.caption = el("p", { className: "hint" });
    root.replaceChildren(
      el("div", { className: "picture-controls" }, el("label", {}, "Colour by ", this.select), this.readout),
      el("div", { className: "picture-canvas" }, this.canvas),
      this.caption,
    );
    this.select.addEventListener("change", () => this.load(this.select.value));
    this.canvas.addEventListener("mousemove", (ev) => this.hover(ev));
    this.canvas.addEventListener("mouseleave", () => {
      this.readout.textContent = "";
      if (this.timelines) this.timelines.crosshair(null);
    });
    window.addEventListener("resize", () => this.draw());
  }

  async load(colour = "tip_margin") {
    this.data = await getJSON(`/api/runs/${encodeURIComponent(this.runId)}/course-map?colour=${colour}`);
    if (!this.data.available) {
      this.canvas.hidden = true;
      this.caption.textContent = this.data.reason;
      return;
    }
    if (!this.select.options.length) {
      for (const [key, label] of Object.entries(this.data.colours)) {
        this.select.append(el("option", { value: key }, label));
      }
      this.select.value = this.data.colour;
    }
    const length = fmt(this.data.length_m);
    this.caption.textContent =
      `${this.data.note} Heading from ${this.data.heading_source}, speed from ${this.data.speed_source}; ` +
      `path ${length} m long, ends ${fmt(this.data.closure_m)} m from its start.`;
    this.draw();
  }

  setRange(range) {
    this.range = range;
    this.draw();
  }

  // Screen position of a ground-plane point: equal scale on both axes, north (y) up.
  transform(width, height) {
    const xs = this.data.x.filter((v) => v !== null);
    const ys = this.data.y.filter((v) => v !== null);
    const pad = 16;
    const x0 = Math.min(...xs), x1 = Math.max(...xs), y0 = Math.min(...ys), y1 = Math.max(...ys);
    const scale = Math.min((width - 2 * pad - 60) / Math.max(x1 - x0, 1e-6), (height - 2 * pad) / Math.max(y1 - y0, 1e-6));
    const ox = pad + ((width - 60 - 2 * pad) - scale * (x1 - x0)) / 2;
    const oy = pad + ((height - 2 * pad) - scale * (y1 - y0)) / 2;
    return (x, y) => [ox + scale * (x - x0), height - (oy + scale * (y - y0))];
  }

  draw() {
    const d = this.data;
    if (!d || !d.available) return;
    const { ctx, width, height } = setupCanvas(this.canvas, 360);
    ctx.clearRect(0, 0, width, height);
    const at = this.transform(width, height);
    this.at = at;
    const vals = (d.value || []).filter((v) => v !== null);
    const lo = vals.length ? Math.min(...vals) : 0;
    const hi = vals.length ? Math.max(...vals) : 1;
    const span = hi - lo || 1;
    // The shown window of the timelines, under the path: a wide dark band.
    if (this.range) {
      ctx.lineWidth = 9;
      ctx.strokeStyle = "rgba(0, 0, 0, 0.22)";
      ctx.lineCap = "round";
      ctx.beginPath();
      let open = false;
      for (let i = 0; i < d.t.length; i++) {
        const inside = d.t[i] >= this.range[0] && d.t[i] <= this.range[1];
        if (!inside || d.x[i] === null) { open = false; continue; }
        const [px, py] = at(d.x[i], d.y[i]);
        if (open) ctx.lineTo(px, py); else ctx.moveTo(px, py);
        open = true;
      }
      ctx.stroke();
    }
    ctx.lineWidth = 3;
    ctx.lineCap = "butt";
    for (let i = 1; i < d.t.length; i++) {
      if (d.x[i] === null || d.x[i - 1] === null) continue;
      const v = d.value ? d.value[i] : null;
      ctx.strokeStyle = v === null ? "#9a9a9a" : viridis((v - lo) / span);
      const [ax, ay] = at(d.x[i - 1], d.y[i - 1]);
      const [bx, by] = at(d.x[i], d.y[i]);
      ctx.beginPath();
      ctx.moveTo(ax, ay);
      ctx.lineTo(bx, by);
      ctx.stroke();
    }
    // Start mark, then the events.
    const [sx, sy] = at(d.x[0], d.y[0]);
    ctx.fillStyle = "#000";
    ctx.fillRect(sx - 4, sy - 4, 8, 8);
    for (const e of d.events) {
      const [ex, ey] = at(e.x, e.y);
      ctx.beginPath();
      ctx.arc(ex, ey, 5, 0, 2 * Math.PI);
      ctx.fillStyle = eventColour(e.kind);
      ctx.fill();
      ctx.lineWidth = 1;
      ctx.strokeStyle = "#000";
      ctx.stroke();
    }
    // Colour key on the right.
    const kx = width - 40, ky = 20, kh = height - 60;
    for (let j = 0; j < kh; j++) {
      ctx.fillStyle = viridis(1 - j / kh);
      ctx.fillRect(kx, ky + j, 12, 1);
    }
    ctx.fillStyle = "#222";
    ctx.font = "11px system-ui, sans-serif";
    const unit = d.value_unit ? ` ${d.value_unit}` : "";
    ctx.fillText(`${fmt(hi)}${unit}`, kx - 22, ky - 6);
    ctx.fillText(`${fmt(lo)}${unit}`, kx - 22, ky + kh + 14);
    this.canvas.dataset.drawn = String((Number(this.canvas.dataset.drawn) || 0) + 1);
  }

  nearest(mx, my) {
    const d = this.data;
    let best = -1, bestD = Infinity;
    for (let i = 0; i < d.t.length; i++) {
      if (d.x[i] === null) continue;
      const [px, py] = this.at(d.x[i], d.y[i]);
      const dist = (px - mx) ** 2 + (py - my) ** 2;
      if (dist < bestD) { bestD = dist; best = i; }
    }
    return bestD <= 400 ? best : -1;
  }

  hover(ev) {
    if (!this.data || !this.data.available || !this.at) return;
    const box = this.canvas.getBoundingClientRect();
    const i = this.nearest(ev.clientX - box.left, ev.clientY - box.top);
    if (i < 0) return;
    const d = this.data;
    const v = d.value ? d.value[i] : null;
    const unit = d.value_unit ? ` ${d.value_unit}` : "";
    this.readout.textContent = `t = ${fmt(d.t[i])} s · ${d.value_label}: ${v === null ? "n/a" : fmt(v) + unit}`;
    this.canvas.dataset.hoverT = String(d.t[i]);
    if (this.timelines) this.timelines.crosshair(d.t[i]);
  }
}

// ----- actuator envelope -----------------------------------------------------------------------

class Envelope {
  constructor(root, runId, timelines) {
    this.runId = runId;
    this.timelines = timelines;
    this.range = null;
    this.select = el("select", { id: "envelope-actuator", ariaLabel: "Actuator" });
    this.windowOnly = el("input", { type: "checkbox", id: "envelope-window" });
    this.canvas = el("canvas", { id: "envelope", role: "img", ariaLabel: "Actuator envelope" });
    this.canvas.picture = this; // for the browser tests
    this.caption = el("p", { className: "hint" });
    root.replaceChildren(
      el(
        "div",
        { className: "picture-controls" },
        el("label", {}, "Actuator ", this.select),
        el("label", {}, this.windowOnly, " only the window the timelines show"),
      ),
      el("div", { className: "picture-canvas" }, this.canvas),
      this.caption,
    );
    this.select.addEventListener("change", () => this.load());
    this.windowOnly.addEventListener("change", () => this.load());
    window.addEventListener("resize", () => this.draw());
  }

  setRange(range) {
    this.range = range;
    if (this.windowOnly.checked) this.load();
  }

  async load() {
    const q = new URLSearchParams();
    if (this.select.value) q.set("actuator", this.select.value);
    if (this.windowOnly.checked && this.range) {
      q.set("t0", this.range[0]);
      q.set("t1", this.range[1]);
    }
    this.data = await getJSON(`/api/runs/${encodeURIComponent(this.runId)}/envelope?${q}`);
    if (!this.select.options.length) {
      for (const name of this.data.actuators) this.select.append(el("option", { value: name }, name));
      this.select.value = this.data.actuator;
    }
    if (!this.data.available) {
      this.caption.textContent = this.data.reason;
      this.canvas.hidden = true;
      return;
    }
    this.canvas.hidden = false;
    const d = this.data;
    this.caption.textContent =
      `Share of time in each cell of joint speed and torque (${d.torque_source}, ${d.samples} samples); ` +
      `dashed: peak torque ${fmt(d.lines.peak)} N·m, dotted: continuous ${fmt(d.lines.continuous)} N·m` +
      (d.lines.motor ? ", solid: the DC-motor torque–speed limit" : "") +
      `; red dots: saturated samples. Peak |torque| ${fmt(d.peak_abs_torque)} N·m; ` +
      `above the continuous rating ${fmt(d.share_above_continuous_pct)} % of the time.`;
    this.draw();
  }

  draw() {
    const d = this.data;
    if (!d || !d.available) return;
    const { ctx, width, height } = setupCanvas(this.canvas, 340);
    const m = { l: 56, r: 16, t: 12, b: 36 };
    const W = width - m.l - m.r, H = height - m.t - m.b;
    const s0 = d.speed_edges[0], s1 = d.speed_edges[d.speed_edges.length - 1];
    const q0 = d.torque_edges[0], q1 = d.torque_edges[d.torque_edges.length - 1];
    const X = (s) => m.l + ((s - s0) / (s1 - s0)) * W;
    const Y = (q) => m.t + H - ((q - q0) / (q1 - q0)) * H;
    this.X = X;
    this.Y = Y;
    ctx.clearRect(0, 0, width, height);
    const maxShare = Math.max(...d.share_pct.filter((v) => v !== null), 1e-12);
    const cw = W / d.n_speed, ch = H / d.n_torque;
    for (let j = 0; j < d.n_torque; j++) {
      for (let i = 0; i < d.n_speed; i++) {
        const v = d.share_pct[j * d.n_speed + i];
        if (!v) continue;
        ctx.fillStyle = viridis(Math.sqrt(v / maxShare)); // square root: rare cells stay visible
        ctx.fillRect(m.l + i * cw, m.t + H - (j + 1) * ch, Math.ceil(cw), Math.ceil(ch));
      }
    }
    ctx.strokeStyle = "#222";
    ctx.lineWidth = 1;
    ctx.strokeRect(m.l, m.t, W, H);
    const hline = (q, dash) => {
      ctx.setLineDash(dash);
      ctx.beginPath();
      ctx.moveTo(m.l, Y(q));
      ctx.lineTo(m.l + W, Y(q));
      ctx.stroke();
    };
    ctx.strokeStyle = "#000";
    for (const sign of [1, -1]) {
      hline(sign * d.lines.peak, [6, 4]);
      hline(sign * d.lines.continuous, [2, 3]);
    }
    ctx.setLineDash([]);
    if (d.lines.motor) {
      ctx.lineWidth = 1.5;
      for (const line of [d.lines.upper, d.lines.lower]) {
        ctx.beginPath();
        line.forEach((q, k) => {
          const px = X(d.lines.speed[k]), py = Y(q);
          if (k) ctx.lineTo(px, py); else ctx.moveTo(px, py);
        });
        ctx.stroke();
      }
    }
    ctx.fillStyle = "#D55E00"; // vermillion, the saturation colour of the palette
    d.saturated_points.speed.forEach((s, k) => {
      ctx.fillRect(X(s) - 1.5, Y(d.saturated_points.torque[k]) - 1.5, 3, 3);
    });
    ctx.fillStyle = "#222";
    ctx.font = "11px system-ui, sans-serif";
    ctx.fillText(`${fmt(s0)}`, m.l, height - 20);
    ctx.fillText(`${fmt(s1)}`, m.l + W - 30, height - 20);
    ctx.fillText(`joint speed [${d.speed_unit}]`, m.l + W / 2 - 40, height - 6);
    ctx.fillText(`${fmt(q1)}`, 4, m.t + 10);
    ctx.fillText(`${fmt(q0)}`, 4, m.t + H);
    ctx.fillText(`torque [${d.torque_unit}]`, 4, m.t + H / 2);
    this.canvas.dataset.drawn = String((Number(this.canvas.dataset.drawn) || 0) + 1);
  }
}

// ----- calibration -----------------------------------------------------------------------------

async function showCalibration(root, runId) {
  const data = await getJSON(`/api/runs/${encodeURIComponent(runId)}/calibration`);
  const verdict = (r) => (r.differs === null ? "not estimated" : r.differs ? "differs" : "ok");
  const rows = data.estimates.map((r) =>
    el(
      "tr",
      { className: r.differs ? "differs" : "" },
      el("td", {}, r.label),
      el("td", { className: "num" }, r.estimate === null ? "n/a" : `${fmt(r.estimate)} ${r.unit}`),
      el("td", { className: "num" }, r.profile === null ? "" : `${fmt(r.profile)} ${r.unit}`),
      el("td", { className: "num" }, `${fmt(r.tolerance)} ${r.tolerance_unit}`),
      el("td", { className: "num" }, String(r.samples)),
      el("td", { title: r.note || "" }, verdict(r)),
    ),
  );
  const fixed = Object.entries(data.corrected_profile);
  root.replaceChildren(
    el(
      "table",
      { className: "calibration-table", id: "calibration-table" },
      el("thead", {}, el("tr", {}, ...["Quantity", "From the run", "Profile", "Tolerance", "Samples", ""].map((h) => el("th", {}, h)))),
      el("tbody", {}, ...rows),
    ),
    fixed.length
      ? el("p", { className: "hint" }, "Suggested [robot] values: ", fixed.map(([k, v]) => `${k} = ${fmt(v)}`).join(", "))
      : el("p", { className: "ok-line" }, "The profile's wheel radius and track width agree with this run."),
  );
}

// Scroll distance below the screen at which the pictures' data is asked for [px].
const PICTURES_AHEAD_PX = 400;

// Build the three pictures below the timelines; returns a hook for the shown window.
// Their data is asked for once the pictures come near the screen: each reads whole
// columns of the run on the server (seconds on an eight-hour run), which held back
// the first zooms of the timelines when asked for with the page.
export function initPictures(runId, timelines) {
  const map = new CourseMap(document.getElementById("course-map-box"), runId, timelines);
  const env = new Envelope(document.getElementById("envelope-box"), runId, timelines);
  const load = () => {
    const pending = [
      map.load(),
      env.load(),
      showCalibration(document.getElementById("calibration-box"), runId),
    ].map((p) => p.catch((err) => showError(document.getElementById("error"), err)));
    Promise.all(pending).then(() => { document.body.dataset.picturesReady = "1"; });
  };
  const section = document.getElementById("course-map-box").closest(".pictures");
  const near = new IntersectionObserver(
    (entries) => {
      if (!entries.some((e) => e.isIntersecting)) return;
      near.disconnect();
      load();
    },
    { rootMargin: `0px 0px ${PICTURES_AHEAD_PX}px 0px` },
  );
  near.observe(section);
  return (range) => {
    map.setRange(range);
    env.setRange(range);
  };
}

