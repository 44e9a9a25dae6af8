// One colour per event kind, everywhere (charts, event list, legends, badges).
// Colours from the colour-blind-safe palette of Okabe & Ito (2008),
// "Color Universal Design", https://jfly.uni-koeln.de/color/ .
// Black and a neutral grey are left free: the compare page draws run A and run B in them.

export const OKABE_ITO = {
  black: "#000000",
  orange: "#E69F00",
  skyBlue: "#56B4E9",
  bluishGreen: "#009E73",
  yellow: "#F0E442",
  blue: "#0072B2",
  vermillion: "#D55E00",
  reddishPurple: "#CC79A7",
};

// Event kind (as the server names it, from analysis.catalogue) -> colour.
export const EVENT_COLOURS = {
  saturation: OKABE_ITO.vermillion,
  slip: OKABE_ITO.orange,
  yaw_slip: OKABE_ITO.yellow,
  low_tip_margin: OKABE_ITO.reddishPurple,
  roll_error: OKABE_ITO.skyBlue,
  pitch_excursion: OKABE_ITO.bluishGreen,
  fall: OKABE_ITO.blue,
};

// Reserved for the compare page; no event kind uses these.
export const RUN_COLOURS = { a: OKABE_ITO.black, b: "#8C8C8C" };

export function eventColour(kind) {
  return EVENT_COLOURS[kind] || "#666666";
}

// Readable label of an event kind.
export function kindLabel(kind) {
  return kind.replace(/_/g, " ");
}

// Line styles of signal traces: neutral inks, told apart by weight and dash,
// so that colour on a chart always means an event kind.
export const TRACE_STYLES = {
  main: { color: "#1F2A30", width: 1.4, dash: "solid" },
  second: { color: "#6E7F88", width: 1.2, dash: "solid" },
  ref: { color: "#1F2A30", width: 1.1, dash: "dot" },
  limit: { color: "#4A5A63", width: 1.0, dash: "dash" },
};

// Build a legend of event kinds: [{kind, meaning}] -> element.
export function eventLegend(kinds, onToggle) {
  const box = document.createElement("div");
  box.className = "legend";
  for (const { kind, meaning } of kinds) {
    const item = document.createElement("label");
    item.className = "legend-item";
    item.title = meaning || "";
    const swatch = document.createElement("span");
    swatch.className = "swatch";
    swatch.style.background = eventColour(kind);
    const name = document.createElement("span");
    name.textContent = kindLabel(kind);
    if (onToggle) {
      const box2 = document.createElement("input");
      box2.type = "checkbox";
      box2.checked = true;
      box2.dataset.kind = kind;
      box2.addEventListener("change", () => onToggle(kind, box2.checked));
      item.append(box2);
    }
    item.append(swatch, name);
    box.append(item);
  }
  return box;
}
