"""Browser tests of the Run page pictures: course map, actuator envelope, calibration check.

Each picture is drawn by the page on a canvas; the tests read its pixels back at
places the data fixes (an event marker, a saturated operating point) and drive
the link between the course map and the timelines with a real mouse.
"""

from __future__ import annotations

from typing import Any

import pytest

from tests.server.dashboard_fixtures import RunInputs
from tests.web.live_server import LiveServer
from tests.web.test_browser import _upload_through_the_page

pytestmark = pytest.mark.browser

# Okabe & Ito (2008) colours as web/js/palette.js gives them to event kinds and saturation.
VERMILLION = (0xD5, 0x5E, 0x00)


@pytest.fixture(scope="module")
def pictured(browser: Any, live: LiveServer, web_demo_inputs: RunInputs) -> str:
    context = browser.new_context(viewport={"width": 1440, "height": 1000})
    page = context.new_page()
    try:
        return _upload_through_the_page(page, live, web_demo_inputs, "pictures run")
    finally:
        context.close()


#: The routes the pictures ask for their data.
PICTURE_ROUTES = ("/course-map", "/envelope", "/calibration")


def _open(page: Any, live: LiveServer, run_id: str) -> None:
    page.goto(f"{live.url}/run.html?id={run_id}")
    page.wait_for_selector("body[data-charts-ready='1']", timeout=60_000)
    # The pictures ask for their data once they come near the screen.
    page.locator(".pictures").scroll_into_view_if_needed()
    page.wait_for_selector("body[data-pictures-ready='1']", timeout=60_000)


def test_pictures_ask_for_their_data_only_near_the_screen(
    page: Any, live: LiveServer, pictured: str
) -> None:
    asked: list[str] = []
    page.on(
        "request",
        lambda r: asked.append(r.url) if any(k in r.url for k in PICTURE_ROUTES) else None,
    )
    page.goto(f"{live.url}/run.html?id={pictured}")
    page.wait_for_selector("body[data-charts-ready='1']", timeout=60_000)
    page.wait_for_selector("#legend > *")  # built after the pictures were set up
    # Two frames: an IntersectionObserver reports after the next layout.
    page.evaluate("() => new Promise((r) => requestAnimationFrame(() => requestAnimationFrame(r)))")
    top = page.evaluate("() => document.querySelector('.pictures').getBoundingClientRect().top")
    # Below the 1000 px screen and the 400 px the page looks ahead (PICTURES_AHEAD_PX).
    assert top > 1400
    assert asked == []
    page.locator(".pictures").scroll_into_view_if_needed()
    page.wait_for_selector("body[data-pictures-ready='1']", timeout=60_000)
    assert sorted(next(k for k in PICTURE_ROUTES if k in url) for url in asked) == sorted(
        PICTURE_ROUTES
    )
    assert page.page_errors == []


def _pixel(page: Any, canvas: str, x: float, y: float) -> tuple[int, int, int, int]:
    rgba = page.evaluate(
        """([sel, x, y]) => {
            const c = document.querySelector(sel);
            const r = window.devicePixelRatio || 1;
            return Array.from(c.getContext('2d').getImageData(Math.round(x * r), Math.round(y * r), 1, 1).data);
        }""",
        [canvas, x, y],
    )
    return tuple(rgba)  # type: ignore[return-value]


def test_course_map_draws_the_path_and_the_events(
    page: Any, live: LiveServer, pictured: str
) -> None:
    _open(page, live, pictured)
    info = page.evaluate(
        """() => {
            const m = document.getElementById('course-map').picture;
            const d = m.data;
            const last = d.events[d.events.length - 1];
            const mid = Math.floor(d.t.length / 2);
            return { n: d.t.length, events: d.events.length, kind: last.kind,
                     ev: m.at(last.x, last.y), mid: m.at(d.x[mid], d.y[mid]), tMid: d.t[mid],
                     note: d.note };
        }"""
    )
    assert info["n"] > 100 and info["events"] > 0
    assert "Dead-reckoned" in page.locator("#course-map-box").inner_text()
    # The last event is drawn last: its marker's centre has the kind's colour.
    colour = page.evaluate(
        "(k) => import('/js/palette.js').then((p) => p.eventColour(k))", info["kind"]
    )
    expected = tuple(int(colour[i : i + 2], 16) for i in (1, 3, 5))
    assert _pixel(page, "#course-map", *info["ev"])[:3] == expected
    # The path is drawn where the data puts it, and nothing is drawn in the far corner.
    assert _pixel(page, "#course-map", *info["mid"])[3] > 100  # a 3 px line, antialiased
    assert _pixel(page, "#course-map", 2, 2)[3] == 0
    # Hovering the path sets the timelines' crosshair at that point's time.
    page.locator("#course-map").scroll_into_view_if_needed()
    box = page.locator("#course-map").bounding_box()
    page.mouse.move(box["x"] + info["mid"][0], box["y"] + info["mid"][1])
    crosshair = page.evaluate(
        "() => [...document.getElementById('charts').timelines.charts.values()][0].crosshair"
    )
    # The nearest drawn point to the pointer may be a neighbour of the one aimed at (slow
    # stretches put many samples under one pixel): its time, within a second of the aim.
    assert crosshair == float(page.get_attribute("#course-map", "data-hover-t"))
    assert crosshair == pytest.approx(info["tMid"], abs=1.0)
    # Zooming the timelines redraws the map with that stretch highlighted.
    before = int(page.get_attribute("#course-map", "data-drawn"))
    page.evaluate("() => document.getElementById('charts').timelines.setRange([10, 20])")
    page.wait_for_function(
        f"() => Number(document.getElementById('course-map').dataset.drawn) > {before}"
    )
    page.select_option("#map-colour", "roll_error")
    page.wait_for_function(
        "() => document.getElementById('course-map').picture.data.colour === 'roll_error'"
    )
    assert "deg" in page.evaluate(
        "() => document.getElementById('course-map').picture.data.value_unit"
    )
    assert page.page_errors == []


def test_envelope_draws_saturated_points_and_calibration_lists_the_checks(
    page: Any, live: LiveServer, pictured: str
) -> None:
    _open(page, live, pictured)
    pts = page.evaluate(
        """() => {
            const e = document.getElementById('envelope').picture;
            const p = e.data.saturated_points;
            const k = p.speed.length - 1;
            return { n: p.speed.length, at: k < 0 ? null : [e.X(p.speed[k]), e.Y(p.torque[k])],
                     actuators: e.data.actuators };
        }"""
    )
    assert "wheel_l" in pts["actuators"]
    if pts["n"]:
        # The last saturated point is drawn last, in the saturation colour.
        assert _pixel(page, "#envelope", *pts["at"])[:3] == VERMILLION
    # Another actuator redraws.
    before = int(page.get_attribute("#envelope", "data-drawn"))
    page.select_option("#envelope-actuator", "wheel_r")
    page.wait_for_function(
        f"() => Number(document.getElementById('envelope').dataset.drawn) > {before}"
    )
    rows = page.locator("#calibration-table tbody tr")
    assert rows.count() >= 5
    text = page.locator("#calibration-box").inner_text()
    assert "Effective wheel radius" in text and "Gyro bias" in text
    assert page.page_errors == []


def test_fleet_page_draws_a_point_per_run_and_opens_it(
    page: Any, live: LiveServer, pictured: str
) -> None:
    page.goto(f"{live.url}/fleet.html")
    page.wait_for_selector("body[data-fleet-ready='1']", timeout=60_000)
    placed = page.evaluate("() => document.getElementById('trend-chart').picturePoints()")
    ids = [p[2] for p in placed]
    assert pictured in ids
    x, y, run_id = placed[ids.index(pictured)]
    # The point is drawn in its version's colour (first version: Okabe & Ito blue #0072B2),
    # or another palette colour when other uploads came first: never the background.
    assert _pixel(page, "#trend-chart", x, y)[3] == 255
    assert page.locator("#trend-versions tbody tr").count() >= 1
    page.select_option("#trend-kpi", "min_tip_margin")
    page.click("#trend-filters button[type=submit]")
    page.wait_for_function(
        "() => document.getElementById('trend-caption').textContent.includes('tip-over')"
    )
    placed = page.evaluate("() => document.getElementById('trend-chart').picturePoints()")
    x, y, run_id = placed[[p[2] for p in placed].index(pictured)]
    page.locator("#trend-chart").scroll_into_view_if_needed()
    box = page.locator("#trend-chart").bounding_box()
    page.mouse.click(box["x"] + x, box["y"] + y)
    page.wait_for_url(f"**/run.html?id={run_id}")
    assert page.page_errors == []
