// Headline KPI badges shared by the Runs and Run pages. Values come from the server
// (analysis.detect.pipeline.headline_kpis), in the units the page shows (angles in degrees,
// converted by analysis.display on the server); the page only formats them.
import { el, fmt } from "./api.js";
import { eventColour } from "./palette.js";

export const HEADLINE = [
  {
    key: "worst_saturation_share",
    kind: "saturation",
    label: "saturated",
    title: "Share of time the most-saturated actuator was saturated",
    format: (v) => `${fmt(100 * v, 2)} %`,
  },
  {
    key: "slip_events",
    kind: "slip",
    label: "slip events",
    title: "Number of wheel-slip events",
    format: (v) => String(v),
  },
  {
    key: "min_tip_margin",
    kind: "low_tip_margin",
    label: "min tip margin",
    title: "Lowest lateral tip-over margin (model estimate): 1 centred, 0 inner wheel unloads",
    format: (v) => fmt(v, 2),
  },
  {
    key: "roll_error_rms",
    kind: "roll_error",
    label: "roll err RMS",
    title: "RMS of roll reference minus roll",
    format: (v, unit) => `${fmt(v, 2)} ${unit}`.trim(),
  },
];

// kpis: SI values by key (used when `shown` is absent); shown: {key: {value, unit}}
// as the server converted them for display; notRun: {key: reason} for KPIs whose
// detector was skipped: they read "not run" (reason on hover), never 0 or a blank.
export function badges(kpis, shown = null, notRun = null) {
  const box = el("div", { className: "badges" });
  if (!kpis) {
    box.append(el("span", { className: "badge muted" }, "not analysed"));
    return box;
  }
  for (const spec of HEADLINE) {
    const display = shown && shown[spec.key] ? shown[spec.key] : null;
    const value = display ? display.value : kpis[spec.key];
    const unit = display ? display.unit : "";
    const reason = notRun && notRun[spec.key];
    const text = reason ? "not run" : value === null || value === undefined ? "–" : spec.format(value, unit);
    const badge = el(
      "span",
      {
        className: reason ? "badge not-run" : "badge",
        title: reason ? `${spec.title}: not run, the detector was skipped (${reason})` : spec.title,
        dataset: { kpi: spec.key },
      },
      el("span", { className: "badge-stripe", style: { background: eventColour(spec.kind) } }),
      el("span", { className: "badge-value" }, text),
      el("span", { className: "badge-label" }, spec.label),
    );
    box.append(badge);
  }
  return box;
}
