// Talking to the Outrigger server: JSON in, one error shape out.
// Every error the server sends is {"error": {"type": ..., "message": ...}};
// pages show the message as text, never as HTML.

const TOKEN_KEY = "outrigger.writeToken";

export class ApiError extends Error {
  constructor(status, type, message) {
    super(message);
    this.status = status;
    this.type = type;
  }
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
  let type = "HTTPError";
  let message = `The server answered ${response.status} ${response.statusText}.`;
  try {
    const body = await response.json();
    if (body && body.error) {
      type = body.error.type || type;
      message = body.error.message || message;
    }
  } catch (_) {
    // not JSON: keep the generic message, never show a raw body
  }
  return new ApiError(response.status, type, message);
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
      if (xhr.status >= 200 && xhr.status < 300 && body) resolve(body);
      else if (body && body.error) reject(new ApiError(xhr.status, body.error.type, body.error.message));
      else reject(new ApiError(xhr.status, "HTTPError", `The server answered ${xhr.status}.`));
    };
    xhr.onerror = () =>
      reject(new ApiError(0, "NetworkError", "The upload was cut off. Is the server still running, and is the upload within its size limit?"));
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
  title.textContent = error.type ? `${error.type}: ` : "Error: ";
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
