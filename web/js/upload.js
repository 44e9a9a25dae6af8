// Upload page: pick or drop files, choose or upload a map and profile, send with a
// progress bar, then follow the ingest/analysis job and link to the run.
import { ApiError, authHeaders, el, fromProblem, getJSON, postForm, showError, waitForJob } from "./api.js";
import { initLayout } from "./layout.js";

const form = document.getElementById("upload-form");
const drop = document.getElementById("drop");
const logsInput = document.getElementById("logs");
const fileList = document.getElementById("file-list");
const errorBox = document.getElementById("error");
const progressBox = document.getElementById("progress");
const sendBar = document.getElementById("send-bar");
const sendText = document.getElementById("send-text");
const jobBar = document.getElementById("job-bar");
const jobText = document.getElementById("job-text");
const done = document.getElementById("done");
const submit = document.getElementById("submit");

let logs = [];
let maxUploadMb = null;

function showFiles() {
  fileList.replaceChildren(
    ...logs.map((f) =>
      el("li", {}, el("span", { className: "file-name" }, f.name), el("span", { className: "file-size" }, `${(f.size / 1048576).toFixed(2)} MiB`)),
    ),
  );
}

function addFiles(files) {
  const names = new Set(logs.map((f) => f.name));
  for (const f of files) if (!names.has(f.name)) logs.push(f);
  showFiles();
}

logsInput.addEventListener("change", () => addFiles(logsInput.files));
for (const type of ["dragenter", "dragover"]) {
  drop.addEventListener(type, (ev) => {
    ev.preventDefault();
    drop.classList.add("over");
  });
}
for (const type of ["dragleave", "drop"]) {
  drop.addEventListener(type, () => drop.classList.remove("over"));
}
drop.addEventListener("drop", (ev) => {
  ev.preventDefault();
  addFiles(ev.dataTransfer.files);
});

async function loadStored(kind, select) {
  try {
    const { names } = await getJSON(`/api/configs/${kind}`);
    for (const name of names) select.append(el("option", { value: name }, name));
  } catch (err) {
    showError(errorBox, err);
  }
}

// Courses of the stored runs, offered by the course field (a new name can still be typed).
async function loadCourses() {
  try {
    const { runs } = await getJSON("/api/runs");
    const courses = [...new Set(runs.map((r) => r.course).filter(Boolean))].sort();
    document.getElementById("course-list").replaceChildren(...courses.map((c) => el("option", { value: c })));
  } catch (err) {
    showError(errorBox, err);
  }
}

function configPart(kind) {
  const select = document.getElementById(`${kind}-name`);
  const file = document.getElementById(`${kind}-file`).files[0] || null;
  const keep = document.getElementById(`${kind}-keep`).checked;
  const keepName = document.getElementById(`${kind}-keep-name`).value.trim();
  return { stored: select.value, file, keep, keepName };
}

async function keepConfig(kind, part) {
  if (!part.keep || !part.file) return;
  if (!part.keepName) throw new ApiError(400, "Something is missing", `Give a name to keep the ${kind === "map" ? "channel map" : "robot profile"} under, or untick 'keep'.`);
  const response = await fetch(`/api/configs/${kind}/${encodeURIComponent(part.keepName)}`, {
    method: "PUT",
    headers: { ...authHeaders(), "Content-Type": "text/plain" },
    body: await part.file.text(),
  });
  if (!response.ok) {
    const body = await response.json().catch(() => null);
    throw fromProblem(body, response.status) || new ApiError(response.status, "The server refused the file", `The server answered ${response.status}.`);
  }
}

function setJob(job) {
  jobBar.value = job.progress;
  jobText.textContent = `${Math.round(100 * job.progress)} % · ${job.message}`;
}

form.addEventListener("submit", async (ev) => {
  ev.preventDefault();
  errorBox.hidden = true;
  done.hidden = true;
  try {
    if (!logs.length) throw new ApiError(400, "Something is missing", "Choose at least one log file.");
    const map = configPart("map");
    const profile = configPart("profile");
    if (!map.file && !map.stored) throw new ApiError(400, "Something is missing", "Choose a stored channel map or upload one.");
    if (!profile.file && !profile.stored) throw new ApiError(400, "Something is missing", "Choose a stored robot profile or upload one.");
    const total = logs.reduce((s, f) => s + f.size, 0);
    if (maxUploadMb && total > maxUploadMb * 1048576) {
      throw new ApiError(413, "The upload is too large", `These files add up to ${(total / 1048576).toFixed(1)} MiB; this server accepts at most ${maxUploadMb} MiB per upload. Split the run, or restart the server with a larger --max-upload-mb.`);
    }
    submit.disabled = true;
    await keepConfig("map", map);
    await keepConfig("profile", profile);

    const data = new FormData();
    for (const [key, value] of new FormData(form).entries()) {
      if (typeof value === "string" && value.trim()) data.append(key, value.trim());
    }
    // The start field is a UTC wall time without a zone: send it as ISO 8601 UTC.
    if (data.has("date")) data.set("date", `${data.get("date")}${data.get("date").length === 16 ? ":00" : ""}Z`);
    data.delete("files");
    for (const f of logs) data.append("files", f, f.name);
    if (map.file) data.append("map_file", map.file, map.file.name);
    else data.append("map_name", map.stored);
    if (profile.file) data.append("profile_file", profile.file, profile.file.name);
    else data.append("profile_name", profile.stored);

    progressBox.hidden = false;
    sendBar.value = 0;
    jobBar.value = 0;
    jobText.textContent = "waiting";
    const { job } = await postForm("/api/upload", data, (f) => {
      sendBar.value = f;
      sendText.textContent = `${Math.round(100 * f)} %`;
    });
    sendBar.value = 1;
    sendText.textContent = "sent";
    const finished = await waitForJob(job.id, setJob);
    if (finished.state === "failed") {
      throw fromProblem(finished.error, 422);
    }
    done.hidden = false;
    done.replaceChildren(
      finished.message.includes("already stored") || finished.message.includes("same files")
        ? `${finished.message[0].toUpperCase()}${finished.message.slice(1)}. `
        : "Ready. ",
      el("a", { id: "run-link", href: `/run.html?id=${encodeURIComponent(finished.run_id)}` }, "Open the run"),
    );
  } catch (err) {
    showError(errorBox, err);
  } finally {
    submit.disabled = false;
  }
});

initLayout().then((info) => {
  if (info) maxUploadMb = info.features.max_upload_mb;
});
loadStored("map", document.getElementById("map-name"));
loadCourses();
loadStored("profile", document.getElementById("profile-name"));
