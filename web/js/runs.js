// Runs page: the table of stored runs with filters and KPI badges.
import { el, fmt, fmtDuration, getJSON, showError } from "./api.js";
import { badges } from "./kpis.js";
import { initLayout } from "./layout.js";

const form = document.getElementById("filters");
const tbody = document.querySelector("#runs tbody");
const empty = document.getElementById("empty");
const errorBox = document.getElementById("error");

function query() {
  const params = new URLSearchParams();
  for (const [key, value] of new FormData(form).entries()) {
    if (String(value).trim()) params.set(key, String(value).trim());
  }
  return params;
}

function fillChoices(select, values) {
  const current = select.value;
  const seen = new Set([...select.options].map((o) => o.value));
  for (const v of [...values].sort()) {
    if (!seen.has(v)) select.append(el("option", { value: v }, v));
  }
  select.value = current;
}

function row(run) {
  const link = el("a", { className: "run-open", href: `/run.html?id=${encodeURIComponent(run.run_id)}` }, run.name || run.run_id);
  const tags = el("div", { className: "tags" });
  for (const tag of run.tags || []) tags.append(el("span", { className: "tag" }, tag));
  return el(
    "tr",
    { dataset: { runId: run.run_id } },
    el("td", { className: "run-name" }, link, el("div", { className: "run-id" }, run.run_id), tags,
      // Compare page: this run as version A; the page offers runs of the same course first.
      el("a", { className: "compare-link", href: `/compare.html?a=${encodeURIComponent(run.run_id)}` }, "Compare with…")),
    el("td", {}, run.course || "–"),
    el("td", {}, run.controller || "–"),
    el("td", {}, run.date ? run.date.replace("T", " ").replace("+00:00", "").replace("Z", "") : "–"),
    el("td", { className: "num" }, fmtDuration(run.duration_s)),
    el("td", { className: "num" }, run.distance_m === null || run.distance_m === undefined ? "–" : `${fmt(run.distance_m, 4)} m`),
    el("td", {}, badges(run.kpis, run.kpis_shown, run.kpis_not_run)),
  );
}

async function load() {
  errorBox.hidden = true;
  try {
    const { runs } = await getJSON(`/api/runs?${query()}`);
    tbody.replaceChildren(...runs.map(row));
    empty.hidden = runs.length > 0;
    fillChoices(form.elements.course, new Set(runs.map((r) => r.course).filter(Boolean)));
    fillChoices(form.elements.controller, new Set(runs.map((r) => r.controller).filter(Boolean)));
    document.body.dataset.loaded = "1";
  } catch (err) {
    showError(errorBox, err);
  }
}

form.addEventListener("submit", (ev) => {
  ev.preventDefault();
  load();
});
form.addEventListener("reset", () => setTimeout(load, 0));

initLayout();
load();
