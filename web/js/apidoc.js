// Offline API reference: lists the endpoints of /openapi.json as plain text.
import { initLayout } from "./layout.js";

function el(tag, text, cls) {
  const node = document.createElement(tag);
  if (text !== undefined) node.textContent = text;
  if (cls) node.className = cls;
  return node;
}

function paramLine(p) {
  const where = p.in === "path" ? "path" : p.in;
  const type = (p.schema && (p.schema.type || (p.schema.anyOf || []).map((s) => s.type).join(" | "))) || "";
  return `${p.name} (${where}${type ? ", " + type : ""}${p.required ? ", required" : ""})`;
}

async function main() {
  initLayout();
  const list = document.getElementById("api-list");
  let spec;
  try {
    const res = await fetch("/openapi.json");
    if (!res.ok) throw new Error(`HTTP ${res.status}`);
    spec = await res.json();
  } catch (err) {
    const box = document.getElementById("api-error");
    box.textContent = `Could not load /openapi.json: ${err.message}. Is the server running?`;
    box.hidden = false;
    return;
  }
  const table = el("table", undefined, "api-table");
  const head = el("tr");
  for (const h of ["Method", "Path", "What it does", "Parameters"]) head.append(el("th", h));
  const thead = el("thead");
  thead.append(head);
  table.append(thead);
  const body = el("tbody");
  for (const [path, ops] of Object.entries(spec.paths || {})) {
    for (const [method, op] of Object.entries(ops)) {
      const row = el("tr");
      row.append(el("td", method.toUpperCase(), "api-method"));
      row.append(el("td", path, "api-path"));
      const first = (op.description || "").split("\n")[0].trim();
      row.append(el("td", first || op.summary || ""));
      row.append(el("td", (op.parameters || []).map(paramLine).join("; ")));
      body.append(row);
    }
  }
  table.append(body);
  list.append(table);
}

main();
