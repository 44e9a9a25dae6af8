"""The canvas strip chart of the Run page (web/js/stripchart.js, ticks.js), in headless Chromium.

Tick steps against Heckbert's nice-number rule, and what the canvas really
painted: event bands blended over the plot background as the compositing rule
says, traces in their ink, line breaks at data gaps, events shorter than a pixel
still visible, hover text inserted as text.
"""

from __future__ import annotations

import math
from typing import Any

import pytest

from tests.web.live_server import LiveServer

pytestmark = pytest.mark.browser

BAND = "#CC79A7"  # reddish purple of Okabe & Ito (2008), the low-tip-margin colour
INK = "#1F2A30"  # the main trace ink (web/js/palette.js)


def _rgb(hex_colour: str) -> tuple[int, int, int]:
    return (int(hex_colour[1:3], 16), int(hex_colour[3:5], 16), int(hex_colour[5:7], 16))


def _module(page: Any, live: LiveServer) -> None:
    page.goto(f"{live.url}/api.html")
    page.evaluate(
        "async () => { window.sc = await import('/js/stripchart.js');"
        " window.ticks = await import('/js/ticks.js'); }"
    )


def test_loose_labels_match_heckberts_worked_example(page: Any, live: LiveServer) -> None:
    _module(page, live)
    got = page.evaluate("() => ticks.looseLabels(105, 543, 5)")
    # Heckbert (1990), "Nice numbers for graph labels", Graphics Gems: data 105..543 with
    # 5 ticks is labelled 100..600 by 100 (from memory of the paper's example).
    assert got == {"step": 100, "lo": 100, "hi": 600}


@pytest.mark.parametrize(
    ("lo", "hi", "count"),
    [
        (0.0, 7.3, 5),
        (-3.2, 2.9, 4),
        (1793.4, 1813.9, 8),
        (0.149, 0.151, 4),
        (-41.0, -40.5, 3),
        (1.3532, 1.4449, 4),  # the ideal step 0.031 rounds up to 0.05: one tick only
    ],
)
def test_ticks_are_nice_steps_inside_the_axis(
    page: Any, live: LiveServer, lo: float, hi: float, count: int
) -> None:
    _module(page, live)
    got = page.evaluate("([a, b, n]) => ticks.ticksWithin(a, b, n)", [lo, hi, count])
    step, values = got["step"], got["values"]
    mantissa = step / 10 ** math.floor(math.log10(step) + 1e-12)
    # Heckbert (1990): steps are 1, 2 or 5 times a power of ten.
    assert min(abs(mantissa - m) for m in (1, 2, 5)) < 1e-9, step
    assert all(lo - 1e-9 * step <= v <= hi + 1e-9 * step for v in values), values
    assert all(abs(v / step - round(v / step)) < 1e-6 for v in values), values
    # about `count` ticks, and never fewer than 3 (a lone tick gives no scale): the
    # rounded step is within a factor 2 of the ideal one (1, 2, 5, 10 are at most 2.5 apart)
    assert 3 <= len(values) <= 2 * count + 1, values


def test_tick_labels_show_the_steps_decimals(page: Any, live: LiveServer) -> None:
    _module(page, live)
    got = page.evaluate(
        "() => [ticks.tickLabel(0.1 + 0.2, 0.1), ticks.tickLabel(-1e-17, 0.5), ticks.tickLabel(1800, 200, ' s'),"
        " ticks.tickLabel(0.15, 0.05)]"
    )
    assert got == ["0.3", "0.0", "1800 s", "0.15"]


# A chart of one row over t = 0..10 s: a constant trace at 0.5 with one sample missing
# (t = 5 s), a band from 3 to 4 s and a band of zero length at 8.5 s (off the grid lines).
PAINT_JS = """
([band, ink]) => {
  const host = document.createElement('div');
  host.style.width = '600px';
  document.body.prepend(host);
  const chart = new sc.StripChart(host, [{label: 'r', unit: ''}],
                                  {margin: {l: 50, r: 10, t: 10, b: 20}, rowHeight: 100});
  const x = [...Array(11).keys()];
  const y = x.map((t) => (t === 5 ? null : 0.5));
  chart.setData({
    traces: [{row: 0, x, y, color: ink, width: 2, dash: 'solid', name: '<b>v</b>', unit: 'm'}],
    bands: [{row: null, x0: 3, x1: 4, color: band, kind: 'k'}, {row: 0, x0: 8.5, x1: 8.5, color: band, kind: 'k'}],
    lines: [], range: [0, 10]});
  chart.resize();
  const ctx = chart.canvas.getContext('2d');
  const dpr = chart.canvas.width / chart.width;
  const yLine = chart.rowTop(0) + chart.rowHeight / 2;
  const at = (t, y) => [...ctx.getImageData(Math.floor(chart.xOf(t) * dpr), Math.floor(y * dpr), 1, 1).data];
  return {
    bandMiddle: at(3.5, chart.rowTop(0) + 20),
    outside: at(1.5, chart.rowTop(0) + 20),
    onTrace: at(1.5, yLine - 0.5),
    inGap: at(5.0, yLine - 0.5),
    shortBand: at(8.5, chart.rowTop(0) + 20),
    dpr,
  };
}
"""


def test_canvas_paints_bands_traces_and_gaps(page: Any, live: LiveServer) -> None:
    _module(page, live)
    px = page.evaluate(PAINT_JS, [BAND, INK])
    alpha = 0.3  # web/js/stripchart.js BAND_ALPHA
    # W3C Compositing and Blending Level 1, source-over: co = as*Cs + ab*Cb*(1 - as),
    # over the opaque white plot background (Cb = 255, ab = 1).
    blended = [alpha * c + (1 - alpha) * 255 for c in _rgb(BAND)]
    # tolerance: 8-bit rounding of the stored colour, one step per channel
    assert px["bandMiddle"][:3] == pytest.approx(blended, abs=1.5), px
    assert px["shortBand"][:3] == pytest.approx(blended, abs=1.5), px
    assert px["outside"][:3] == [255, 255, 255], px
    # the 2 px line's centre row is painted in the ink (anti-aliasing may lighten it a little)
    assert px["onTrace"][:3] == pytest.approx(list(_rgb(INK)), abs=40), px
    # no line across the missing sample: background there
    assert px["inGap"][:3] == [255, 255, 255], px


def test_hover_box_shows_values_as_text(page: Any, live: LiveServer) -> None:
    _module(page, live)
    page.evaluate(PAINT_JS, [BAND, INK])
    overlay = page.locator("canvas.strip-overlay").first
    box = overlay.bounding_box()
    assert box is not None
    # t = 2 s: 50 px margin + 2/10 of the 540 px plot width
    page.mouse.move(box["x"] + 50 + 0.2 * 540, box["y"] + 40)
    tip = page.locator(".strip-tip").first
    assert tip.is_visible()
    text = tip.inner_text()
    assert "t = 2.000 s" in text and "<b>v</b>: 0.5 m" in text, text
    assert tip.locator("b").count() == 0
