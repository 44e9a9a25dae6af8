// Fleet page: one KPI per run against date, coloured by controller version, with each
// version's median and quartiles; click a point to open the run. Drawn on a canvas of
// our own from /api/fleet/trends; the page computes no statistics.
import { el, fmt, getJSON, showError } from "./api.js";
import { initLayout } from "./layout.js";
import { OKABE_ITO } from "./palette.js";

// Versions in the order of their first run, coloured from the Okabe & Ito (2008)
// colour-blind-safe palette (black and grey left out: they mark runs A and B elsewhere).
const VERSION_COLOURS = [
  OKABE_ITO.blue, OKABE_ITO.vermillion, OKABE_ITO.bluishGreen, OKABE_ITO.reddishPurple,
  OKABE_ITO.orange, OKABE_ITO.skyBlue, OKABE_ITO.yellow,
];

const canvas = document.getElementById("trend-chart");
const form = document.getElementById("trend-filters");
const errorBox = document.getElementById("error");
let data = null;
let placed = []; // screen positions of the points: [x, y, run_id]

function colourOf(version) {
  const i = data.versions.findIndex((v) => v.version === version);
  return VERSION_COLOURS[(i < 0 ? 0 : i) % VERSION_COLOURS.length];
}

function draw() {
  if (!data) return;
  const ratio = window.devicePixelRatio || 1;
  const width = canvas.parentElement.clientWidth || 900;
  const height = 380;
  canvas.width = Math.round(width * ratio);
  canvas.height = Math.round(height * ratio);
  canvas.style.width = `${width}px`;
  canvas.style.height = `${height}px`;
  const ctx = canvas.getContext("2d");
  ctx.setTransform(ratio, 0, 0, ratio, 0, 0);
  ctx.clearRect(0, 0, width, height);
  const m = { l: 64, r: 16, t: 16, b: 40 };
  const W = width - m.l - m.r, H = height - m.t - m.b;
  const pts = data.points.map((p) => ({ ...p, ms: Date.parse(p.date) })).filter((p) => !Number.isNaN(p.ms));
  placed = [];
  if (!pts.length) {
    ctx.fillStyle = "#555";
    ctx.font = "14px system-ui, sans-serif";
    ctx.fillText("No analysed run matches.", m.l, m.t + 30);
    canvas.dataset.drawn = String((Number(canvas.dataset.drawn) || 0) + 1);
    return;
  }
  let t0 = Math.min(...pts.map((p) => p.ms)), t1 = Math.max(...pts.map((p) => p.ms));
  if (t1 === t0) { t0 -= 43200e3; t1 += 43200e3; }
  let y0 = Math.min(...pts.map((p) => p.value)), y1 = Math.max(...pts.map((p) => p.value));
  if (y1 === y0) { y0 -= 1; y1 += 1; }
  const pad = 0.06 * (y1 - y0);
  y0 -= pad; y1 += pad;
  const X = (ms) => m.l + ((ms - t0) / (t1 - t0)) * W;
  const Y = (v) => m.t + H - ((v - y0) / (y1 - y0)) * H;
  // Each version's middle half as a band over its date span, its median as a line.
  for (const v of data.versions) {
    const a = X(Date.parse(v.first)), b = Math.max(X(Date.parse(v.last)), a + 2);
    ctx.globalAlpha = 0.15;
    ctx.fillStyle = colourOf(v.version);
    ctx.fillRect(a, Y(v.q3), b - a, Y(v.q1) - Y(v.q3));
    ctx.globalAlpha = 1;
    ctx.strokeStyle = colourOf(v.version);
    ctx.lineWidth = 2;
    ctx.beginPath();
    ctx.moveTo(a, Y(v.median));
    ctx.lineTo(b, Y(v.median));
    ctx.stroke();
  }
  for (const p of pts) {
    const x = X(p.ms), y = Y(p.value);
    ctx.fillStyle = colourOf(p.version);
    ctx.beginPath();
    ctx.arc(x, y, 3.5, 0, 2 * Math.PI);
    ctx.fill();
    placed.push([x, y, p.run_id]);
  }
  ctx.strokeStyle = "#222";
  ctx.lineWidth = 1;
  ctx.strokeRect(m.l, m.t, W, H);
  ctx.fillStyle = "#222";
  ctx.font = "11px system-ui, sans-serif";
  const unit = data.unit ? ` [${data.unit}]` : "";
  ctx.fillText(`${fmt(y1)}`, 6, m.t + 10);
  ctx.fillText(`${fmt(y0)}`, 6, m.t + H);
  ctx.fillText(`${data.label}${unit}`, 6, m.t + H / 2);
  ctx.fillText(new Date(t0).toISOString().slice(0, 10), m.l, height - 22);
  ctx.fillText(new Date(t1).toISOString().slice(0, 10), m.l + W - 64, height - 22);
  ctx.fillText("run date (UTC)", m.l + W / 2 - 30, height - 6);
  canvas.dataset.drawn = String((Number(canvas.dataset.drawn) || 0) + 1);
}

function showVersions() {
  const body = document.querySelector("#trend-versions tbody");
  body.replaceChildren(
    ...data.versions.map((v) =>
      el(
        "tr",
        {},
        el("td", {}, el("span", { className: "swatch", style: { background: colourOf(v.version) } })),
        el("td", {}, v.version),
        el("td", { className: "num" }, String(v.n)),
        el("td", { className: "num" }, fmt(v.median)),
        el("td", { className: "num" }, `${fmt(v.q1)} – ${fmt(v.q3)}`),
        el("td", {}, v.first.slice(0, 10)),
        el("td", {}, v.last.slice(0, 10)),
      ),
    ),
  );
  const better = data.better === "lower" ? "lower is better" : "higher is better";
  const unit = data.unit ? ` in ${data.unit}` : "";
  document.getElementById("trend-caption").textContent =
    `${data.label}${unit} (${better}); ${data.points.length} runs` +
    (data.not_run ? `; ${data.not_run} run(s) left out where this was not run or not analysed.` : ".");
}

async function load() {
  const q = new URLSearchParams();
  for (const key of ["kpi", "course", "tag"]) {
    const value = form.elements[key].value;
    if (value) q.set(key, value);
  }
  try {
    data = await getJSON(`/api/fleet/trends?${q}`);
    errorBox.hidden = true;
  } catch (err) {
    showError(errorBox, err);
    return;
  }
  const kpiSelect = form.elements.kpi;
  if (!kpiSelect.options.length) {
    for (const [key, label] of Object.entries(data.kpis)) kpiSelect.append(el("option", { value: key }, label));
    kpiSelect.value = data.kpi;
  }
  draw();
  showVersions();
  document.body.dataset.fleetReady = "1";
}

canvas.addEventListener("click", (ev) => {
  const box = canvas.getBoundingClientRect();
  const mx = ev.clientX - box.left, my = ev.clientY - box.top;
  let best = null, bestD = 64; // within 8 px
  for (const [x, y, id] of placed) {
    const d = (x - mx) ** 2 + (y - my) ** 2;
    if (d < bestD) { bestD = d; best = id; }
  }
  if (best) location.href = `/run.html?id=${encodeURIComponent(best)}`;
});
canvas.picturePoints = () => placed; // for the browser tests

form.addEventListener("submit", (ev) => {
  ev.preventDefault();
  load();
});
window.addEventListener("resize", draw);

async function main() {
  initLayout();
  const runs = await getJSON("/api/runs").catch(() => ({ runs: [] }));
  const courses = new Set((runs.runs || []).map((r) => r.course).filter(Boolean));
  for (const c of [...courses].sort()) form.elements.course.append(el("option", { value: c }, c));
  await load();
}

main();
