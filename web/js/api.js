// Talking to the Outrigger server: JSON in, one error shape out.
// Every error the server sends is an RFC 9457 problem details object
// (application/problem+json: type, title, status, detail); pages show the title and
// the detail as text, never as HTML, and never an internal class name.

const TOKEN_KEY = "outrigger.writeToken";

export class ApiError extends Error {
  // title: the problem's short sentence for people; message: its detail.
  constructor(status, title, message, problemType = "about:blank") {
    super(message);
    this.status = status;
    this.title = title;
    this.problemType = problemType;
  }
}

// An ApiError from a problem details object (RFC 9457), or null when it is not one.
export function fromProblem(body, status) {
  if (!body || typeof body !== "object" || typeof body.detail !== "string") return null;
  return new ApiError(body.status || status, body.title || "Error", body.detail, body.type || "about:blank");
}

export function writeToken() {
  return sessionStorage.getItem(TOKEN_KEY) || "";
}

export function setWriteToken(value) {
  if (value) sessionStorage.setItem(TOKEN_KEY, value);
  else sessionStorage.removeItem(TOKEN_KEY);
}

export function authHeaders() {
  const token = writeToken();
  return token ? { Authorization: `Bearer ${token}` } : {};
}

async function errorFrom(response) {
  try {
    const problem = fromProblem(await response.json(), response.status);
    if (problem) return problem;
  } catch (_) {
    // not JSON: keep the generic message, never show a raw body
  }
  return new ApiError(response.status, "The server refused the request", `The server answered ${response.status} ${response.statusText}.`);
}

export async function getJSON(url, options = {}) {
  return readJSON(fetch(url, options));
}

// The JSON body of a response (or of a request already on its way), or the server's error.
export async function readJSON(responsePromise) {
  const response = await responsePromise;
  if (!response.ok) throw await errorFrom(response);
  return response.json();
}

export async function sendJSON(method, url, body) {
  const headers = { ...authHeaders() };
  const init = { method, headers };
  if (body !== undefined) {
    headers["Content-Type"] = "application/json";
    init.body = JSON.stringify(body);
  }
  const response = await fetch(url, init);
  if (!response.ok) throw await errorFrom(response);
  return response.json();
}

// Upload a FormData with progress reports (fetch cannot report upload progress).
export function postForm(url, form, onProgress) {
  return new Promise((resolve, reject) => {
    const xhr = new XMLHttpRequest();
    xhr.open("POST", url);
    const token = writeToken();
    if (token) xhr.setRequestHeader("Authorization", `Bearer ${token}`);
    xhr.upload.onprogress = (ev) => {
      if (ev.lengthComputable && onProgress) onProgress(ev.loaded / ev.total);
    };
    xhr.onload = () => {
      let body = null;
      try {
        body = JSON.parse(xhr.responseText);
      } catch (_) {
        body = null;
      }
      const problem = xhr.status >= 400 ? fromProblem(body, xhr.status) : null;
      if (xhr.status >= 200 && xhr.status < 300 && body) resolve(body);
      else if (problem) reject(problem);
      else reject(new ApiError(xhr.status, "The server refused the upload", `The server answered ${xhr.status}.`));
    };
    xhr.onerror = () =>
      reject(new ApiError(0, "The upload did not reach the server", "The upload was cut off. Is the server still running, and is the upload within its size limit?"));
    xhr.send(form);
  });
}

// Poll a background job until it is done or failed.
export async function waitForJob(jobId, onUpdate, intervalMs = 400) {
  for (;;) {
    const { job } = await getJSON(`/api/jobs/${encodeURIComponent(jobId)}`);
    if (onUpdate) onUpdate(job);
    if (job.state === "done" || job.state === "failed") return job;
    await new Promise((r) => setTimeout(r, intervalMs));
  }
}

let infoPromise = null;
export function serverInfo() {
  if (!infoPromise) infoPromise = getJSON("/api/info");
  return infoPromise;
}

// Put an error message into an element, as text.
export function showError(element, error) {
  element.hidden = false;
  element.replaceChildren();
  const title = document.createElement("strong");
  title.textContent = error.title ? `${error.title}: ` : "Error: ";
  const text = document.createElement("span");
  text.className = "error-text";
  text.textContent = error.message || String(error);
  element.append(title, text);
}

// Small DOM helper: el("td", {className: "x"}, "text", child, ...). Strings become text nodes.
export function el(tag, props = {}, ...children) {
  const node = document.createElement(tag);
  for (const [key, value] of Object.entries(props)) {
    if (key === "dataset") Object.assign(node.dataset, value);
    else if (key === "style") Object.assign(node.style, value);
    else if (key.startsWith("on")) node.addEventListener(key.slice(2), value);
    else node[key] = value;
  }
  for (const child of children) {
    if (child === null || child === undefined || child === false) continue;
    node.append(child instanceof Node ? child : document.createTextNode(String(child)));
  }
  return node;
}

export function fmt(value, digits = 3) {
  if (value === null || value === undefined || Number.isNaN(value)) return "–";
  if (typeof value !== "number") return String(value);
  if (value !== 0 && (Math.abs(value) >= 1e5 || Math.abs(value) < 1e-3)) return value.toExponential(2);
  return Number(value.toPrecision(digits)).toString();
}

export function fmtDuration(seconds) {
  if (seconds === null || seconds === undefined) return "–";
  const s = Math.round(seconds);
  const h = Math.floor(s / 3600);
  const m = Math.floor((s % 3600) / 60);
  const r = s % 60;
  if (h) return `${h} h ${String(m).padStart(2, "0")} min`;
  if (m) return `${m} min ${String(r).padStart(2, "0")} s`;
  return `${seconds.toFixed(1)} s`;
}
