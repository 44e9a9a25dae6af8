// Axis ticks for the strip charts (js/stripchart.js): nice steps and their labels.
//
// "Nice numbers for graph labels": Heckbert, P. S. (1990), in Graphics Gems,
// Academic Press, pp. 61-63. A step of 1, 2 or 5 times a power of ten.
export function niceNumber(x, round) {
  if (!(x > 0) || !Number.isFinite(x)) return 1;
  const exponent = Math.floor(Math.log10(x));
  const fraction = x / 10 ** exponent;
  let nice;
  if (round) nice = fraction < 1.5 ? 1 : fraction < 3 ? 2 : fraction < 7 ? 5 : 10;
  else nice = fraction <= 1 ? 1 : fraction <= 2 ? 2 : fraction <= 5 ? 5 : 10;
  return nice * 10 ** exponent;
}

// Heckbert's loose labelling: the tick step and the labelled span [lo, hi] that
// covers [min, max] with about `count` ticks.
export function looseLabels(min, max, count) {
  const span = niceNumber(max - min, false);
  const step = niceNumber(span / Math.max(count - 1, 1), true);
  return { step, lo: Math.floor(min / step) * step, hi: Math.ceil(max / step) * step };
}

// The next smaller nice step: 5 -> 2 -> 1 -> 0.5 (times the same power of ten).
function smallerNice(step) {
  const exponent = Math.floor(Math.log10(step) + 1e-9);
  const mantissa = Math.round(step / 10 ** exponent);
  return (mantissa === 5 ? 2 : mantissa === 2 ? 1 : 0.5) * 10 ** exponent;
}

function multiplesWithin(min, max, step) {
  const values = [];
  const first = Math.ceil(min / step - 1e-9);
  for (let k = first; k * step <= max + step * 1e-9; k++) values.push(k * step);
  return values;
}

// Ticks inside [min, max] (a tight axis: the axis ends where the data ends, so the
// span is not rounded up first as in loose labelling), at multiples of a nice step;
// at least min(3, count) of them, taking the next smaller nice step when rounding
// the ideal step up left fewer.
export function ticksWithin(min, max, count) {
  if (!(max > min)) return { step: 1, values: [min] };
  let step = niceNumber((max - min) / Math.max(count - 1, 1), true);
  let values = multiplesWithin(min, max, step);
  for (let tries = 0; values.length < Math.min(3, count) && tries < 4; tries++) {
    step = smallerNice(step);
    values = multiplesWithin(min, max, step);
  }
  return { step, values };
}

function decimalsFor(step) {
  return Math.max(0, Math.min(6, -Math.floor(Math.log10(step) + 1e-9)));
}

export function tickLabel(value, step, suffix = "") {
  const d = decimalsFor(step);
  const text = Math.abs(value) < step * 1e-6 ? (0).toFixed(d) : value.toFixed(d);
  return text + suffix;
}
