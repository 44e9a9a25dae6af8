// Run page: facts, KPIs, stacked timelines, event list with keyboard stepping,
// ingest report, skipped detectors, thresholds and re-analysis, edit and delete.
import { el, fmt, fmtDuration, fromProblem, getJSON, readJSON, sendJSON, serverInfo, showError, waitForJob } from "./api.js";
import { badges } from "./kpis.js";
import { lapCard, lapStrip } from "./laps.js";
import { initLayout } from "./layout.js";
import { eventColour, eventLegend, kindLabel } from "./palette.js";
import { initPictures } from "./pictures.js";
import { Timelines } from "./timeline.js";

const runId = new URLSearchParams(location.search).get("id");
const errorBox = document.getElementById("error");
let timelines = null;
let events = [];
let visibleEvents = [];
let current = -1;
let run = null;
let picturesRange = null; // tells the course map and the envelope the shown window

function fail(err) {
  showError(errorBox, err);
}

// ----- header -----------------------------------------------------------------
function showHead(meta) {
  document.title = `${meta.name || meta.run_id} · Outrigger`;
  document.getElementById("run-name").textContent = meta.name || meta.run_id;
  const facts = [
    meta.course && `course ${meta.course}`,
    meta.controller && `controller ${meta.controller}`,
    meta.date && meta.date.replace("T", " ").replace("+00:00", " UTC"),
    meta.duration_s !== undefined && fmtDuration(meta.duration_s),
    meta.distance_m !== undefined && meta.distance_m !== null && `${fmt(meta.distance_m, 3)} m travelled`,
    `id ${meta.run_id}`,
  ].filter(Boolean);
  document.getElementById("run-facts").textContent = facts.join(" · ");
  const tags = document.getElementById("run-tags");
  tags.replaceChildren(...(meta.tags || []).map((t) => el("span", { className: "tag" }, t)));
  document.getElementById("run-notes").textContent = meta.notes || "";
  document.getElementById("dl-events").href = `/api/runs/${encodeURIComponent(meta.run_id)}/events.csv`;
  document.getElementById("dl-zip").href = `/api/runs/${encodeURIComponent(meta.run_id)}/files.zip`;
}

// ----- KPIs ---------------------------------------------------------------------
function showKpis(headline, shown, analysis, notRun = null, kpisShown = null) {
  const strip = document.getElementById("kpis");
  strip.replaceChildren(badges(headline, shown, notRun ? notRun.kpis : null));
  if (analysis) {
    const counts = analysis.event_counts || {};
    const skippedKinds = (notRun && notRun.event_kinds) || {};
    const summary = el("div", { className: "event-counts" });
    for (const [kind, n] of Object.entries(counts)) {
      // A skipped detector found nothing because it never looked: "not run", not 0.
      const reason = skippedKinds[kind];
      summary.append(
        el(
          "span",
          { className: reason ? "count-chip not-run" : "count-chip", title: reason ? `not run: ${reason}` : "", dataset: { kind } },
          el("span", { className: "swatch", style: { background: eventColour(kind) } }),
          `${kindLabel(kind)} ${reason ? "not run" : n}`,
        ),
      );
    }
    strip.append(summary);
  }
  const detail = document.getElementById("kpi-detail");
  detail.replaceChildren(analysis ? valueView(kpisShown || analysis.kpis) : el("p", { className: "empty" }, "Not analysed."));
}

// A generic, text-only view of nested JSON (ingest report, KPIs).
function valueView(value, depth = 0) {
  if (value === null || value === undefined) return el("span", { className: "muted" }, "–");
  if (Array.isArray(value)) {
    if (!value.length) return el("span", { className: "muted" }, "none");
    if (value.every((v) => v === null || typeof v !== "object")) return el("span", {}, value.map((v) => (typeof v === "number" ? fmt(v, 3) : String(v))).join(", "));
    return el("ol", { className: "plain-list" }, ...value.map((v) => el("li", {}, valueView(v, depth + 1))));
  }
  if (typeof value === "object" && Object.keys(value).length === 2 && "value" in value && "unit" in value) {
    // A number the server converted for display (analysis.display): value and unit.
    return el("span", { className: "kpi-value" }, `${fmt(value.value, 3)} ${value.unit}`.trim());
  }
  if (typeof value === "object") {
    const dl = el("dl", { className: depth ? "kv nested" : "kv" });
    for (const [k, v] of Object.entries(value)) dl.append(el("dt", {}, k.replace(/_/g, " ")), el("dd", {}, valueView(v, depth + 1)));
    return dl;
  }
  if (typeof value === "number") return el("span", {}, fmt(value, 3));
  if (typeof value === "boolean") return el("span", {}, value ? "yes" : "no");
  return el("span", { className: "pre" }, String(value));
}

function showDetectors(analysis) {
  const skipped = document.getElementById("skipped");
  const notes = document.getElementById("notes-list");
  if (!analysis) {
    skipped.replaceChildren(el("p", { className: "empty" }, "This run has not been analysed yet: use Re-analyse below."));
    notes.replaceChildren();
    return;
  }
  if (analysis.skipped && analysis.skipped.length) {
    skipped.replaceChildren(
      el("h3", {}, "Skipped detectors"),
      el("ul", { className: "skipped-list" }, ...analysis.skipped.map((s) => el("li", {}, el("strong", {}, s.detector), ": ", s.reason))),
    );
  } else {
    skipped.replaceChildren(el("p", { className: "ok-line" }, "Every detector ran."));
  }
  const entries = Object.entries(analysis.notes || {});
  notes.replaceChildren(
    ...(entries.length
      ? [el("h3", {}, "Notes"), el("ul", { className: "notes-list" }, ...entries.flatMap(([d, list]) => list.map((n) => el("li", {}, el("strong", {}, d), ": ", n))))]
      : []),
  );
  const version = analysis.analysis_version ? `analysis ${analysis.analysis_version}, ${analysis.analysed_at || ""}` : "";
  if (version) notes.append(el("p", { className: "hint" }, version));
}

function showIngest(meta) {
  const report = meta.ingest_report ?? meta.report ?? null;
  const box = document.getElementById("ingest-report");
  box.replaceChildren(report ? valueView(report) : el("p", { className: "empty" }, "No ingest report stored."));
  // Plausibility warnings (wrong unit, sign or time base suspected): shown above the charts.
  const warnings = report ? Object.values(report).flatMap((stream) => (stream && stream.warnings) || []) : [];
  const warnBox = document.getElementById("ingest-warnings");
  warnBox.hidden = warnings.length === 0;
  warnBox.replaceChildren(
    el("strong", {}, `Ingest warnings (${warnings.length}): the run was stored, but check the channel map.`),
    el("ul", {}, ...warnings.map((w) => el("li", { dataset: { check: w.check } }, w.message))),
  );
}

// ----- events -------------------------------------------------------------------
function showEvents() {
  const hidden = timelines ? timelines.hiddenKinds : new Set();
  visibleEvents = events.filter((e) => !hidden.has(e.kind));
  const tbody = document.querySelector("#events tbody");
  tbody.replaceChildren(
    ...visibleEvents.map((e, i) =>
      el(
        "tr",
        { className: "event-row", tabIndex: -1, dataset: { index: String(i), kind: e.kind }, onclick: () => selectEvent(i) },
        el("td", {}, el("span", { className: "swatch", style: { background: eventColour(e.kind) } })),
        el("td", {}, kindLabel(e.kind)),
        el("td", {}, e.channel || "robot"),
        el("td", { className: "num" }, e.start_s.toFixed(2)),
        el("td", { className: "num" }, fmt(e.duration_s, 3)),
        el("td", { className: "num", title: e.detail && e.detail.signal ? e.detail.signal : "" }, peakText(e)),
      ),
    ),
  );
  document.getElementById("event-count").textContent = `${visibleEvents.length}`;
  document.getElementById("no-events").hidden = visibleEvents.length > 0;
  current = -1;
}

// The peak in the unit the server converted it to for display (angles in degrees).
function peakText(e) {
  const shown = e.shown || { peak: e.peak, unit: (e.detail && e.detail.unit) || "" };
  return shown.peak === null || shown.peak === undefined ? "–" : `${fmt(shown.peak, 3)} ${shown.unit}`.trim();
}

function selectEvent(i) {
  if (!visibleEvents.length) return;
  current = (i + visibleEvents.length) % visibleEvents.length;
  for (const row of document.querySelectorAll("#events tr.event-row")) row.classList.toggle("active", Number(row.dataset.index) === current);
  const row = document.querySelector(`#events tr.event-row[data-index="${current}"]`);
  if (row) row.scrollIntoView({ block: "nearest" });
  if (timelines) timelines.zoomToEvent(visibleEvents[current]);
}

document.addEventListener("keydown", (ev) => {
  const target = ev.target;
  if (target && (target.tagName === "INPUT" || target.tagName === "TEXTAREA" || target.tagName === "SELECT" || target.isContentEditable)) return;
  if (ev.ctrlKey || ev.metaKey || ev.altKey) return;
  if (ev.key === "]") {
    selectEvent(current + 1);
    ev.preventDefault();
  } else if (ev.key === "[") {
    selectEvent(current < 0 ? visibleEvents.length - 1 : current - 1);
    ev.preventDefault();
  } else if (ev.key === "0" && timelines) {
    timelines.setRange(null);
    ev.preventDefault();
  } else if ((ev.key === "+" || ev.key === "=") && timelines) {
    timelines.zoomBy(0.5);
    ev.preventDefault();
  } else if (ev.key === "-" && timelines) {
    timelines.zoomBy(2);
    ev.preventDefault();
  } else if ((ev.key === "ArrowLeft" || ev.key === "ArrowRight") && timelines) {
    timelines.panBy(ev.key === "ArrowLeft" ? -0.25 : 0.25);
    ev.preventDefault();
  }
});

// ----- thresholds and re-analysis ----------------------------------------------------
async function showThresholds(analysis) {
  const info = await serverInfo();
  const used = (analysis && analysis.thresholds) || {};
  const form = document.getElementById("thresholds-form");
  form.replaceChildren(
    ...info.thresholds.map((spec) =>
      el(
        "label",
        { title: spec.meaning },
        el("span", { className: "th-key" }, spec.key),
        el("input", { type: "number", step: "any", min: "0", name: spec.key, value: String(Number(Number(used[spec.key] ?? spec.default).toPrecision(6))) }),
        el("span", { className: "th-unit" }, spec.unit || "–"),
      ),
    ),
  );
}

async function reanalyse() {
  const form = document.getElementById("thresholds-form");
  const bar = document.getElementById("reanalyse-bar");
  const text = document.getElementById("reanalyse-text");
  const body = {};
  for (const input of form.querySelectorAll("input")) {
    if (input.value.trim() !== "") body[input.name] = Number(input.value);
  }
  errorBox.hidden = true;
  try {
    const { job } = await sendJSON("POST", `/api/runs/${encodeURIComponent(runId)}/analyse`, body);
    bar.hidden = false;
    const finished = await waitForJob(job.id, (j) => {
      bar.value = j.progress;
      text.textContent = j.message;
    });
    if (finished.state === "failed") throw fromProblem(finished.error, 422);
    text.textContent = "done; reloading";
    await load();
    text.textContent = "done";
  } catch (err) {
    fail(err);
  }
}

// ----- edit and delete -------------------------------------------------------------------
function setupEdit() {
  const form = document.getElementById("edit-form");
  document.getElementById("edit-open").addEventListener("click", () => {
    form.elements.name.value = run.name || "";
    form.elements.tags.value = (run.tags || []).join(", ");
    form.elements.notes.value = run.notes || "";
    form.hidden = false;
  });
  document.getElementById("edit-cancel").addEventListener("click", () => {
    form.hidden = true;
  });
  form.addEventListener("submit", async (ev) => {
    ev.preventDefault();
    errorBox.hidden = true;
    try {
      const tags = form.elements.tags.value.split(",").map((t) => t.trim()).filter(Boolean);
      const { run: updated } = await sendJSON("PATCH", `/api/runs/${encodeURIComponent(runId)}`, {
        name: form.elements.name.value,
        notes: form.elements.notes.value,
        tags,
      });
      run = updated;
      showHead(updated);
      form.hidden = true;
    } catch (err) {
      fail(err);
    }
  });
  document.getElementById("delete").addEventListener("click", async () => {
    const answer = window.prompt(`Deleting a run cannot be undone. Type its id (${runId}) to delete it.`);
    if (answer === null) return;
    try {
      await sendJSON("DELETE", `/api/runs/${encodeURIComponent(runId)}?confirm=${encodeURIComponent(answer.trim())}`);
      location.href = "/";
    } catch (err) {
      fail(err);
    }
  });
}

// ----- the shown window in the address (a link opens the run at the same moment) -------------
function windowFromUrl() {
  const params = new URLSearchParams(location.search);
  const t0 = Number(params.get("t0"));
  const t1 = Number(params.get("t1"));
  return params.has("t0") && params.has("t1") && Number.isFinite(t0) && Number.isFinite(t1) && t1 > t0 ? [t0, t1] : null;
}

function rememberWindow(range) {
  const params = new URLSearchParams(location.search);
  if (range) {
    params.set("t0", range[0].toFixed(3));
    params.set("t1", range[1].toFixed(3));
  } else {
    params.delete("t0");
    params.delete("t1");
  }
  history.replaceState(null, "", `${location.pathname}?${params}`);
}

// Every sample of the shown window as CSV; the server says when a window is too large.
async function downloadWindow() {
  if (!timelines || !timelines.shown()) return;
  const [t0, t1] = timelines.shown();
  const params = new URLSearchParams({ t0: t0.toFixed(3), t1: t1.toFixed(3) });
  errorBox.hidden = true;
  try {
    const response = await fetch(`/api/runs/${encodeURIComponent(runId)}/window.csv?${params}`);
    if (!response.ok) await readJSON(Promise.resolve(response)); // throws the server's error
    const link = el("a", { href: URL.createObjectURL(await response.blob()), download: `${runId}-${params.get("t0")}-${params.get("t1")}s.csv` });
    link.click();
    setTimeout(() => URL.revokeObjectURL(link.href), 10_000);
  } catch (err) {
    fail(err);
  }
}

// ----- load --------------------------------------------------------------------------
async function load() {
  // Every request at once; the charts' series go out as soon as the plan is in. On the
  // first load the page's inline script has asked for the run and the plan already.
  const id = encodeURIComponent(runId);
  const early = window.outriggerEarly && window.outriggerEarly.id === runId ? window.outriggerEarly : null;
  window.outriggerEarly = null; // a reload after re-analysis asks again
  const runRequest = early ? readJSON(early.run) : getJSON(`/api/runs/${id}`);
  const planRequest = early ? readJSON(early.plan) : getJSON(`/api/runs/${id}/charts`);
  const infoRequest = serverInfo();
  // Marked as handled: when the run's own request fails, that is the error shown.
  planRequest.catch(() => {});
  infoRequest.catch(() => {});
  const data = await runRequest;
  run = data.run;
  const analysis = data.analysis;
  events = analysis ? analysis.events : [];
  const { panels } = await planRequest;
  timelines = new Timelines(document.getElementById("charts"), runId, panels, events, {
    onRange: (range) => {
      rememberWindow(range);
      if (picturesRange) picturesRange(range);
    },
  });
  const opening = windowFromUrl();
  const drawn = timelines.draw().then(() => {
    if (opening) timelines.setRange(timelines.clamp(opening));
  });
  showHead(run);
  showKpis(data.headline, data.headline_shown, analysis, data.not_run, data.kpis_shown);
  lapStrip(document.getElementById("lap-strip"), data.laps_shown, (range) => {
    if (timelines) timelines.setRange(timelines.clamp(range));
  });
  // The event list (hundreds of rows on a long run) and the rest of the page are built
  // once the charts are drawn: building and laying them out first held the charts back.
  await drawn.catch(() => {});
  showEvents();
  showDetectors(analysis);
  lapCard(document.getElementById("lap-card"), data.laps_shown);
  showIngest(run);
  picturesRange = initPictures(runId, timelines);
  picturesRange(timelines.range);
  const info = await infoRequest;
  const legend = document.getElementById("legend");
  legend.replaceChildren(
    eventLegend(info.event_kinds, (kind, visible) => {
      if (timelines) timelines.setKindVisible(kind, visible);
      showEvents();
    }),
  );
  await showThresholds(analysis);
  await drawn;
}

async function main() {
  initLayout();
  if (!runId) {
    fail({ type: "RequestError", message: "No run chosen: open a run from the Runs page." });
    return;
  }
  setupEdit();
  document.getElementById("reanalyse").addEventListener("click", reanalyse);
  document.getElementById("dl-window").addEventListener("click", downloadWindow);
  try {
    await load();
  } catch (err) {
    fail(err);
  }
}

main();
